using Fleet.Estimation.Anchors;
using Fleet.Estimation.Filtering;
using Fleet.Estimation.Geometry;
using Fleet.Estimation.Measurements;
using MathNet.Numerics.Distributions;

namespace Fleet.Estimation.Tests;

/// <summary>One generated event with the truth at its time.</summary>
internal readonly record struct SimEvent(double Time, bool IsOdometry, TdoaMeasurement Tdoa, OdometryMeasurement Odometry, Vector3D TruthTag, Vector3D TruthReference, double TruthYaw);

/// <summary>
/// Seeded synthetic measurement stream for filter tests: independent Gaussian TDOA noise on random anchor pairs,
/// optional NLOS excess delay (exponential, positive, on one link of the pair) and noisy wheel odometry.
/// </summary>
internal sealed class SyntheticRun
{
    public required AnchorMap Map { get; init; }

    /// <summary>Truth at time t: reference point, yaw, forward speed, yaw rate.</summary>
    public required Func<double, (Vector3D Reference, double Yaw, double Speed, double YawRate)> Truth { get; init; }

    public Vector3D Lever { get; init; }

    public double Duration { get; init; } = 30;

    public double StartTime { get; init; } = 100;

    public double TdoaRate { get; init; } = 40;

    public double OdometryRate { get; init; } = 20;

    public double Sigma { get; init; } = 0.1;

    public double NlosFraction { get; init; }

    public double NlosMeanMetres { get; init; } = 1.0;

    public double OdometrySpeedSigma { get; init; } = 0.02;

    public double OdometryYawRateSigma { get; init; } = 0.01;

    public int Seed { get; init; } = 1;

    public int NlosCount { get; private set; }

    public int TdoaCount { get; private set; }

    public static Func<double, (Vector3D, double, double, double)> Static(Vector3D reference) => _ => (reference, 0.0, 0.0, 0.0);

    /// <summary>Counter-clockwise circle; heading tangent to the path.</summary>
    public static Func<double, (Vector3D, double, double, double)> Circle(Vector3D centre, double radius, double speed, double startAngle = 0) => t =>
    {
        var w = speed / radius;
        var theta = startAngle + (w * t);
        var p = centre + new Vector3D(radius * Math.Cos(theta), radius * Math.Sin(theta), 0);
        return (p, PlanarOdometryModel.WrapAngle(theta + (Math.PI / 2)), speed, w);
    };

    public Vector3D TagAt(double t)
    {
        var (reference, yaw, _, _) = Truth(t - StartTime);
        return TdoaMeasurementModel.TagPosition(reference, yaw, Lever);
    }

    public List<SimEvent> Generate()
    {
        var rng = new Random(Seed);
        var normal = new Normal(0, 1, rng);
        var excess = new Exponential(1.0 / NlosMeanMetres, rng);
        var events = new List<SimEvent>();
        var tdoaCount = (int)(Duration * TdoaRate);
        for (var k = 0; k < tdoaCount; k++)
        {
            var t = StartTime + ((k + 0.37) / TdoaRate);
            var (reference, yaw, _, _) = Truth(t - StartTime);
            var tag = TdoaMeasurementModel.TagPosition(reference, yaw, Lever);
            var a = rng.Next(Map.Count);
            var b = (a + 1 + rng.Next(Map.Count - 1)) % Map.Count;
            var ddiff = TdoaMeasurementModel.Predict(tag, Map[a].Position, Map[a].AntennaDelayMetres, Map[b].Position, Map[b].AntennaDelayMetres)
                + (Sigma * normal.Sample());
            if (rng.NextDouble() < NlosFraction)
            {
                // Excess path on one link: longer distance to b raises ddiff, longer distance to a lowers it.
                var e = excess.Sample();
                ddiff += rng.Next(2) == 0 ? e : -e;
                NlosCount++;
            }

            events.Add(new SimEvent(t, false, new TdoaMeasurement(t, a, b, ddiff), default, tag, reference, yaw));
        }

        TdoaCount = tdoaCount;
        if (OdometryRate > 0)
        {
            var odoCount = (int)(Duration * OdometryRate);
            for (var k = 0; k < odoCount; k++)
            {
                var t = StartTime + (k / OdometryRate);
                var (reference, yaw, v, w) = Truth(t - StartTime);
                var tag = TdoaMeasurementModel.TagPosition(reference, yaw, Lever);
                var odo = new OdometryMeasurement(t, v + (OdometrySpeedSigma * normal.Sample()), w + (OdometryYawRateSigma * normal.Sample()));
                events.Add(new SimEvent(t, true, default, odo, tag, reference, yaw));
            }
        }

        events.Sort((x, y) => x.Time.CompareTo(y.Time));
        return events;
    }

    public static UpdateResult Submit(RobotFilter filter, in SimEvent e) =>
        e.IsOdometry ? filter.SubmitOdometry(e.Odometry) : filter.Submit(e.Tdoa);
}
