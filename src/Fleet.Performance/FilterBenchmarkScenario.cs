using Fleet.Estimation.Anchors;
using Fleet.Estimation.Filtering;
using Fleet.Estimation.Geometry;
using Fleet.Estimation.Measurements;
using MathNet.Numerics.Distributions;

namespace Fleet.Performance;

/// <summary>
/// A fixed, seeded workload for the filter benchmarks: a TDOA-only tag circling inside an invented eight-anchor
/// hall at 100 TDOAs per second, with Gaussian noise and 5 % positive outliers so the robust path does real work.
/// The trajectory is periodic, so laps can be replayed with a time offset for as long as a benchmark needs.
/// </summary>
public sealed class FilterBenchmarkScenario
{
    public const double RateHz = 100;
    public const double Sigma = 0.08;
    public const double AccelerationNoise = 0.5;
    public const int MaxIterations = 5;

    private const double LapSeconds = 40;

    public FilterBenchmarkScenario(int seed = 17)
    {
        Map = AnchorMap.Create("bench-hall",
        [
            new Anchor("BA-1", new Vector3D(0, 0, 7.5), new Vector3D(45, 20, 0)),
            new Anchor("BA-2", new Vector3D(30, 0, 2.4), new Vector3D(135, -10, 0)),
            new Anchor("BA-3", new Vector3D(30, 20, 7.5), new Vector3D(-135, 20, 0)),
            new Anchor("BA-4", new Vector3D(0, 20, 2.4), new Vector3D(-45, -10, 0)),
            new Anchor("BA-5", new Vector3D(15, 0, 5.0), new Vector3D(90, 0, 0)),
            new Anchor("BA-6", new Vector3D(15, 20, 5.0), new Vector3D(-90, 0, 0)),
            new Anchor("BA-7", new Vector3D(0, 10, 5.0), new Vector3D(0, 0, 0)),
            new Anchor("BA-8", new Vector3D(30, 10, 5.0), new Vector3D(180, 0, 0)),
        ]);

        var random = new Random(seed);
        var normal = new Normal(0, Sigma, random);
        var count = (int)(LapSeconds * RateHz);
        Lap = new TdoaMeasurement[count];
        for (var i = 0; i < count; i++)
        {
            var t = (i + 1) / RateHz;
            var p = TagAt(t);
            var a = random.Next(Map.Count);
            var b = (a + 1 + random.Next(Map.Count - 1)) % Map.Count;
            var ddiff = Vector3D.Distance(p, Map[b].Position) - Vector3D.Distance(p, Map[a].Position) + normal.Sample();
            if (random.NextDouble() < 0.05)
            {
                ddiff += 0.5 + (2 * random.NextDouble());
            }

            Lap[i] = new TdoaMeasurement(t, a, b, ddiff);
        }
    }

    public AnchorMap Map { get; }

    /// <summary>One lap of measurements; lap k is the same with <see cref="LapSeconds"/>·k added to each time.</summary>
    public TdoaMeasurement[] Lap { get; }

    public static double LapDuration => LapSeconds;

    public static Vector3D TagAt(double t)
    {
        var angle = 2 * Math.PI * t / LapSeconds;
        return new Vector3D(15 + (8 * Math.Cos(angle)), 10 + (6 * Math.Sin(angle)), 1.0);
    }

    public static Vector3D VelocityAt(double t)
    {
        var w = 2 * Math.PI / LapSeconds;
        var angle = w * t;
        return new Vector3D(-8 * w * Math.Sin(angle), 6 * w * Math.Cos(angle), 0);
    }

    public FilterOptions FleetOptions() => new()
    {
        Motion = MotionModelKind.ConstantVelocity3D,
        Kernel = RobustKernel.Huber,
        TdoaSigmaMetres = Sigma,
        HorizontalAccelerationDensity = AccelerationNoise,
        VerticalAccelerationDensity = AccelerationNoise,
        MaxIrlsIterations = MaxIterations,

        // The reference has a fixed measurement variance; compare like with like.
        AdaptiveNoise = false,
    };

    /// <summary>A Fleet filter already locked on the tag at t = 0, so the benchmark times steady-state updates.</summary>
    public RobotFilter CreateFleetFilter()
    {
        var filter = new RobotFilter(Map, FleetOptions());
        filter.SeedPose(0, TagAt(0), 0, 0.1, Math.PI);
        return filter;
    }

    /// <summary>The MathNet reference, started from the same state as <see cref="CreateFleetFilter"/>.</summary>
    public TextbookRobustEkf CreateReference()
    {
        var fleet = CreateFleetFilter();
        var pose = new PoseEstimate();
        fleet.GetPose(pose);
        double[] state = [pose.Position.X, pose.Position.Y, pose.Position.Z, pose.Velocity.X, pose.Velocity.Y, pose.Velocity.Z];
        var covariance = new double[36];
        int[] map = [0, 1, 2, 4, 5, 6];
        for (var r = 0; r < 6; r++)
        {
            for (var c = 0; c < 6; c++)
            {
                covariance[(r * 6) + c] = pose[map[r], map[c]];
            }
        }

        var gate = ChiSquared.InvCDF(1, new FilterOptions().GateProbability);
        return new TextbookRobustEkf(Map, Sigma, AccelerationNoise, gate, MaxIterations, state, covariance, 0);
    }

    /// <summary>Measurement <paramref name="index"/> of the endless sequence (lap-shifted).</summary>
    public TdoaMeasurement At(long index)
    {
        var lap = index / Lap.Length;
        var m = Lap[index % Lap.Length];
        return m with { Time = m.Time + (lap * LapSeconds) };
    }
}
