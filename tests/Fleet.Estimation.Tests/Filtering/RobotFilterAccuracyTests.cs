using Fleet.Estimation.Filtering;
using Fleet.Estimation.Geometry;
using MathNet.Numerics.Distributions;
using MathNet.Numerics.LinearAlgebra;
using Xunit.Abstractions;

namespace Fleet.Estimation.Tests.Filtering;

/// <summary>Filter-level accuracy and consistency on seeded synthetic runs.</summary>
public class RobotFilterAccuracyTests(ITestOutputHelper output)
{
    [Fact]
    public void Submit_StaticTagGaussianNoise_IsAccurateAndConsistent()
    {
        // Static tag, Gaussian noise only, eight anchors with 5 m vertical spread. Accuracy: horizontal RMSE after
        // convergence ≤ 1.3 × the per-epoch CRLB (one TDOA per anchor against anchor 1, independent noise:
        // (GᵀG)⁻¹σ², Chan & Ho 1994). Consistency: 3-dof position NEES inside the two-sided 95 % band
        // [χ²₃(0.025), χ²₃(0.975)] (Bar-Shalom et al. 2001 §5.4, from memory) for ≥ 90 % of the steps, pooled over
        // independent seeded runs because one run's NEES values are strongly correlated in time.
        var map = TestSites.Hall();
        var truth = new Vector3D(12.4, 7.3, 0.8);
        const double sigma = 0.1;
        var options = new FilterOptions
        {
            Motion = MotionModelKind.ConstantVelocity3D,
            TdoaSigmaMetres = sigma,
            HorizontalAccelerationDensity = 1e-5,
            VerticalAccelerationDensity = 1e-5,
            InitialVelocitySigma = 0.2,
        };
        var lower = ChiSquared.InvCDF(3, 0.025);
        var upper = ChiSquared.InvCDF(3, 0.975);
        int inside = 0, steps = 0;
        double sumSq = 0;
        var pose = new PoseEstimate();
        for (var seed = 0; seed < 20; seed++)
        {
            var run = new SyntheticRun { Map = map, Truth = SyntheticRun.Static(truth), Duration = 20, TdoaRate = 20, OdometryRate = 0, Sigma = sigma, Seed = 100 + seed };
            var filter = new RobotFilter(map, options);
            foreach (var e in run.Generate())
            {
                SyntheticRun.Submit(filter, e);
                if (filter.State == TrackingState.Acquiring || e.Time < run.StartTime + 5)
                {
                    continue;
                }

                filter.GetPose(pose);
                var err = pose.TagPosition - truth;
                sumSq += (err.X * err.X) + (err.Y * err.Y);
                var p = Matrix<double>.Build.Dense(3, 3, (i, j) => pose[i, j]);
                var ev = Vector<double>.Build.Dense([err.X, err.Y, err.Z]);
                var nees = ev * p.Inverse() * ev;
                if (nees >= lower && nees <= upper)
                {
                    inside++;
                }

                steps++;
            }

            Assert.Equal(0, filter.Counters.Reinitialisations);
        }

        var rmse = Math.Sqrt(sumSq / steps);
        var crlb = PerEpochHorizontalCrlb(map, truth, sigma);
        var fraction = inside / (double)steps;
        output.WriteLine($"static: RMSE {rmse:F4} m, per-epoch CRLB {crlb:F4} m, NEES in band {fraction:P1} over {steps} steps");
        Assert.True(rmse <= 1.3 * crlb, $"RMSE {rmse} vs CRLB {crlb}");
        Assert.True(fraction >= 0.90, $"NEES in band {fraction}");
    }

    [Theory]
    [InlineData(MotionModelKind.PlanarOdometry)]
    [InlineData(MotionModelKind.ConstantVelocity3D)]
    public void Submit_MovingRobotWithHeavyNlos_RobustKernelsHalveTheError(MotionModelKind motion)
    {
        // ≥ 15 % of TDOAs carry a positive, exponential excess delay (mean 1 m) on one link. Robust (Huber, Tukey)
        // horizontal RMSE must be ≤ 0.5 × plain least squares without a gate, and the robust filters must not diverge.
        var map = TestSites.Hall();
        var lever = new Vector3D(0.3, 0.1, 0.45);
        var run = new SyntheticRun
        {
            Map = map,
            Truth = SyntheticRun.Circle(new Vector3D(15, 10, 0), 6, 1.2),
            Lever = lever,
            Duration = 60,
            NlosFraction = 0.2,
            Seed = 7,
        };
        var events = run.Generate();
        Assert.True(run.NlosCount >= 0.15 * run.TdoaCount);

        double Rmse(RobustKernel kernel, bool gate, out int losses)
        {
            var filter = new RobotFilter(map, new FilterOptions { Motion = motion, Kernel = kernel, GateEnabled = gate, TagLeverArm = lever });
            var pose = new PoseEstimate();
            double sum = 0;
            var n = 0;
            foreach (var e in events)
            {
                SyntheticRun.Submit(filter, e);
                if (e.IsOdometry || e.Time < run.StartTime + 10 || filter.State == TrackingState.Acquiring)
                {
                    continue;
                }

                filter.GetPose(pose);
                var err = pose.TagPosition - e.TruthTag;
                sum += (err.X * err.X) + (err.Y * err.Y);
                n++;
            }

            losses = (int)filter.Counters.Reinitialisations;
            Assert.True(n > 0.8 * 50 * run.TdoaRate, $"{kernel}: only {n} tracked steps");
            return Math.Sqrt(sum / n);
        }

        var plain = Rmse(RobustKernel.LeastSquares, gate: false, out _);
        var huber = Rmse(RobustKernel.Huber, gate: true, out var huberLosses);
        var tukey = Rmse(RobustKernel.Tukey, gate: true, out var tukeyLosses);
        output.WriteLine($"{motion}: RMSE LS(no gate) {plain:F3} m, Huber {huber:F3} m, Tukey {tukey:F3} m");
        Assert.Equal(0, huberLosses);
        Assert.Equal(0, tukeyLosses);
        Assert.True(huber <= 0.5 * plain, $"Huber {huber} vs LS {plain}");
        Assert.True(tukey <= 0.5 * plain, $"Tukey {tukey} vs LS {plain}");
    }

    [Fact]
    public void Submit_PlanarRobotWithoutSeed_AlignsHeadingFromMotion()
    {
        var map = TestSites.Hall();
        var lever = new Vector3D(0.3, 0.1, 0.45);
        var run = new SyntheticRun { Map = map, Truth = SyntheticRun.Circle(new Vector3D(15, 10, 0), 6, 1.0, 1.0), Lever = lever, Duration = 30, Seed = 9 };
        var filter = new RobotFilter(map, new FilterOptions { TagLeverArm = lever });
        var pose = new PoseEstimate();
        SimEvent last = default;
        foreach (var e in run.Generate())
        {
            SyntheticRun.Submit(filter, e);
            last = e;
        }

        filter.GetPose(pose);
        output.WriteLine($"yaw {pose.Yaw:F3} vs {last.TruthYaw:F3}, ref error {(pose.Position - last.TruthReference).Length:F3} m, state {filter.State}");
        Assert.True(filter.HeadingKnown);
        Assert.Equal(TrackingState.Locked, filter.State);
        Assert.True(Math.Abs(PlanarOdometryModel.WrapAngle(pose.Yaw - last.TruthYaw)) < 0.1);
        Assert.True((pose.Position - last.TruthReference).HorizontalLength < 0.15);
        Assert.True(3 * Math.Sqrt(pose[3, 3]) > Math.Abs(PlanarOdometryModel.WrapAngle(pose.Yaw - last.TruthYaw)));
    }

    /// <summary>Horizontal RMS bound √(Cxx + Cyy) of one epoch of TDOAs against anchor 1 with independent noise σ (3-D position).</summary>
    private static double PerEpochHorizontalCrlb(Anchors.AnchorMap map, Vector3D tag, double sigma)
    {
        var m = map.Count - 1;
        var g = Matrix<double>.Build.Dense(m, 3);
        var u1 = (tag - map[0].Position).Normalized();
        for (var i = 1; i < map.Count; i++)
        {
            var ui = (tag - map[i].Position).Normalized();
            g[i - 1, 0] = ui.X - u1.X;
            g[i - 1, 1] = ui.Y - u1.Y;
            g[i - 1, 2] = ui.Z - u1.Z;
        }

        var c = (g.Transpose() * g).Inverse() * sigma * sigma;
        return Math.Sqrt(c[0, 0] + c[1, 1]);
    }
}
