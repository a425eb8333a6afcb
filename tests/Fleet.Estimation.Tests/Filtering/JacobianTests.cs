using Fleet.Estimation.Anchors;
using Fleet.Estimation.Filtering;
using Fleet.Estimation.Geometry;

namespace Fleet.Estimation.Tests.Filtering;

/// <summary>Analytic Jacobians against centred finite differences (common practice; h = 1e-6, CHECKS.md §7 style tolerance).</summary>
public class JacobianTests
{
    private const double Step = 1e-6;

    [Fact]
    public void Predict_WithAntennaDelays_IsDistanceDifferencePlusDelays()
    {
        // Closed form: (|p − b| + δb) − (|p − a| + δa).
        var map = TestSites.Hall();
        var tag = new Vector3D(12, 7, 0.5);
        var a = map[0];
        var b = map[1];
        var expected = ((tag - b.Position).Length + 0.05) - (tag - a.Position).Length;
        Assert.Equal(expected, TdoaMeasurementModel.Predict(tag, a.Position, a.AntennaDelayMetres, b.Position, b.AntennaDelayMetres), 12);
    }

    [Fact]
    public void Evaluate_ConstantVelocity_MatchesFiniteDifferences()
    {
        var map = TestSites.Hall();
        var rng = new Random(21);
        Span<double> jac = stackalloc double[6];
        for (var trial = 0; trial < 50; trial++)
        {
            double[] state = [rng.NextDouble() * 30, rng.NextDouble() * 20, rng.NextDouble() * 3, 1, -1, 0.1];
            var a = rng.Next(8);
            var b = (a + 1 + rng.Next(7)) % 8;
            TdoaMeasurementModel.Evaluate(MotionModelKind.ConstantVelocity3D, state, Vector3D.Zero, map, a, b, jac);
            for (var j = 0; j < 6; j++)
            {
                var numeric = CentredDifference(state, j, s => TdoaMeasurementModel.Evaluate(MotionModelKind.ConstantVelocity3D, s, Vector3D.Zero, map, a, b, new double[6]));
                AssertClose(numeric, jac[j]);
            }
        }
    }

    [Fact]
    public void Evaluate_PlanarWithLeverArmAndYaw_MatchesFiniteDifferences()
    {
        var map = TestSites.Hall();
        var lever = new Vector3D(0.35, -0.12, 0.45);
        var rng = new Random(22);
        Span<double> jac = stackalloc double[4];
        for (var trial = 0; trial < 50; trial++)
        {
            double[] state = [rng.NextDouble() * 30, rng.NextDouble() * 20, 0.0, (rng.NextDouble() - 0.5) * 2 * Math.PI];
            var a = rng.Next(8);
            var b = (a + 1 + rng.Next(7)) % 8;
            TdoaMeasurementModel.Evaluate(MotionModelKind.PlanarOdometry, state, lever, map, a, b, jac);
            Assert.NotEqual(0.0, jac[3]);
            for (var j = 0; j < 4; j++)
            {
                var numeric = CentredDifference(state, j, s => TdoaMeasurementModel.Evaluate(MotionModelKind.PlanarOdometry, s, lever, map, a, b, new double[4]));
                AssertClose(numeric, jac[j]);
            }
        }
    }

    [Fact]
    public void PlanarTransition_MatchesFiniteDifferencesOfStep()
    {
        var rng = new Random(23);
        Span<double> f = stackalloc double[16];
        for (var trial = 0; trial < 50; trial++)
        {
            double[] state = [rng.NextDouble() * 30, rng.NextDouble() * 20, 0.1, (rng.NextDouble() - 0.5) * 2 * Math.PI];
            var v = (rng.NextDouble() - 0.3) * 3;
            var w = (rng.NextDouble() - 0.5) * 2;
            var dt = 0.01 + (rng.NextDouble() * 0.5);
            PlanarOdometryModel.Transition(state, v, w, dt, f);
            for (var row = 0; row < 4; row++)
            {
                for (var col = 0; col < 4; col++)
                {
                    var numeric = CentredDifference(state, col, s =>
                    {
                        var next = new double[4];
                        PlanarOdometryModel.Step(s, v, w, dt, next);
                        return row == 3 ? next[3] - PlanarOdometryModel.WrapAngle(state[3] + (w * dt)) : next[row];
                    });
                    AssertClose(numeric, f[(row * 4) + col]);
                }
            }
        }
    }

    [Fact]
    public void ConstantVelocityProcessNoise_MatchesIntegratedWhiteAcceleration()
    {
        // Q = ∫₀^dt Φ(s)·G·q·Gᵀ·Φ(s)ᵀ ds with G = (0, 1)ᵀ per axis → q·[[dt³/3, dt²/2], [dt²/2, dt]]
        // (Bar-Shalom et al. 2001, §6.2, from memory); integral evaluated numerically with MathNet.
        const double dt = 0.37, qh = 0.8, qv = 0.05;
        var q = new double[36];
        ConstantVelocityModel.ProcessNoise(dt, qh, qv, q);
        var pp = MathNet.Numerics.Integrate.OnClosedInterval(s => s * s, 0, dt);
        var pv = MathNet.Numerics.Integrate.OnClosedInterval(s => s, 0, dt);
        Assert.Equal(qh * pp, q[0], 12);
        Assert.Equal(qh * pv, q[3], 12);
        Assert.Equal(qh * pv, q[18], 12);
        Assert.Equal(qh * dt, q[21], 12);
        Assert.Equal(qv * pp, q[14], 12);
        Assert.Equal(0.0, q[1], 12);
    }

    [Fact]
    public void PredictWithGradient_TagOnAnchor_IsFinite()
    {
        var map = TestSites.Hall();
        var onAnchor = map[2].Position;
        var value = TdoaMeasurementModel.PredictWithGradient(onAnchor, map[2].Position, 0, map[3].Position, 0, out var g);
        Assert.True(double.IsFinite(value));
        Assert.True(g.IsFinite);
        Span<double> jac = stackalloc double[4];
        double[] state = [onAnchor.X, onAnchor.Y, onAnchor.Z, 0.3];
        var h = TdoaMeasurementModel.Evaluate(MotionModelKind.PlanarOdometry, state, Vector3D.Zero, map, 2, 3, jac);
        Assert.True(double.IsFinite(h));
        foreach (var j in jac)
        {
            Assert.True(double.IsFinite(j));
        }
    }

    [Fact]
    public void TagPosition_QuarterTurn_RotatesLeverArm()
    {
        // Rz(π/2)·(1, 0, 0.5) = (0, 1, 0.5).
        var tag = TdoaMeasurementModel.TagPosition(new Vector3D(2, 3, 0), Math.PI / 2, new Vector3D(1, 0, 0.5));
        Assert.Equal(2.0, tag.X, 12);
        Assert.Equal(4.0, tag.Y, 12);
        Assert.Equal(0.5, tag.Z, 12);
        var viaRotation = new Vector3D(2, 3, 0) + Rotation3D.FromYaw(Math.PI / 2).Apply(new Vector3D(1, 0, 0.5));
        Assert.Equal(viaRotation.X, tag.X, 12);
        Assert.Equal(viaRotation.Y, tag.Y, 12);
    }

    private static double CentredDifference(double[] state, int index, Func<double[], double> f)
    {
        var plus = (double[])state.Clone();
        var minus = (double[])state.Clone();
        plus[index] += Step;
        minus[index] -= Step;
        return (f(plus) - f(minus)) / (2 * Step);
    }

    private static void AssertClose(double numeric, double analytic)
    {
        // Relative error below 1e-6 (CS231n gradient-check practice, from memory) plus an absolute 1e-8 for the
        // round-off of a centred difference of values of tens of metres (≈ 1e-16·30 m / 1e-6).
        var scale = Math.Max(Math.Abs(numeric), Math.Abs(analytic));
        Assert.True(Math.Abs(numeric - analytic) <= (1e-6 * scale) + 1e-8, $"numeric {numeric} vs analytic {analytic}");
    }

}
