using Fleet.Estimation.Anchors;
using Fleet.Estimation.Filtering;
using Fleet.Estimation.Geometry;
using Fleet.Estimation.Measurements;
using MathNet.Numerics.Distributions;
using MathNet.Numerics.LinearAlgebra;
using Xunit.Abstractions;

namespace Fleet.Estimation.Tests.Filtering;

/// <summary>Multilateration against the CHECKS.md §5 fixtures and the TDOA Cramér–Rao bound.</summary>
public class MultilaterationTests(ITestOutputHelper output)
{
    private static readonly MultilaterationOptions PlanarLeastSquares = new() { FixedHeight = 0, Kernel = RobustKernel.LeastSquares, SigmaMetres = 0.1 };

    [Theory]
    [InlineData(RobustKernel.LeastSquares)]
    [InlineData(RobustKernel.Huber)]
    [InlineData(RobustKernel.Tukey)]
    public void Solve_NoiseFreeSquareFixture_ReturnsTrueTag(RobustKernel kernel)
    {
        // CHECKS.md §5 numeric fixture (recomputed): anchors on the 10 m square, tag (3, 4); range differences to
        // anchor 1 are 3.062257748, 4.219544457, 1.708203932.
        var map = TestSites.Square();
        TdoaMeasurement[] burst =
        [
            new(0, 0, 1, 3.062257748),
            new(0, 0, 2, 4.219544457),
            new(0, 0, 3, 1.708203932),
        ];
        var result = TdoaMultilateration.Solve(map, burst, new MultilaterationOptions { FixedHeight = 0, Kernel = kernel });
        Assert.True(result.Converged, result.Status.ToString());
        Assert.Equal(3.0, result.Position.X, 8);
        Assert.Equal(4.0, result.Position.Y, 8);
        Assert.Equal(3, result.DistinctPairs);
        Assert.Equal(3, result.IndependentDifferences);
    }

    [Fact]
    public void Solve_FifthAnchorAdded_GivesSameAnswer()
    {
        // CHECKS.md §5: adding anchor (5, −3) gives the same answer.
        var map = AnchorMap.Create("harbor-point-five", [.. TestSites.Square().Anchors, new Anchor("HP-A05", new Vector3D(5, -3, 0), Vector3D.Zero)]);
        var tag = new Vector3D(3, 4, 0);
        var burst = new TdoaMeasurement[4];
        for (var b = 1; b < 5; b++)
        {
            burst[b - 1] = new TdoaMeasurement(0, 0, b, (tag - map[b].Position).Length - (tag - map[0].Position).Length);
        }

        var result = TdoaMultilateration.Solve(map, burst, PlanarLeastSquares);
        Assert.True(result.Converged);
        Assert.Equal(3.0, result.Position.X, 9);
        Assert.Equal(4.0, result.Position.Y, 9);
    }

    [Theory]
    [InlineData(5.0, 5.0, 0.005, 0.0, 0.005)]
    [InlineData(3.0, 4.0, 0.00555357, -0.00028432, 0.00478971)]
    public void Crlb_SquareFixture_MatchesChecksTable(double x, double y, double cxx, double cxy, double cyy)
    {
        // CHECKS.md §5 CRLB fixture, σ_TOA = 0.1 m, Q = σ²(I + 11ᵀ); Chan & Ho (1994).
        var crlb = Crlb(TestSites.Square(), new Vector3D(x, y, 0), 0.1);
        Assert.Equal(cxx, crlb[0, 0], 7);
        Assert.Equal(cxy, crlb[0, 1], 7);
        Assert.Equal(cyy, crlb[1, 1], 7);
    }

    [Fact]
    public void Solve_MonteCarloAtSquareCentre_CovarianceWithinTenPercentOfCrlb()
    {
        // CHECKS.md §5: seeded Monte-Carlo of 10⁴ trials at (5, 5); empirical covariance within 10 % of the CRLB
        // (GᵀQ⁻¹G)⁻¹ with Q = σ²(I + 11ᵀ), and never below it by more than the sampling error.
        // Noise: independent arrival errors per anchor, differenced. The solver weighs all six pairwise differences
        // equally: for one epoch, Σ over all pairs of (eᵢ − eⱼ)² = N·eᵀ(I − 11ᵀ/N)e, and I − 11ᵀ/N is exactly the
        // projection Cᵀ(CCᵀ)⁻¹C of the reference-anchor differences C, so unweighted all-pairs least squares is the
        // efficient (GLS) estimator for this Q (derived).
        const double sigma = 0.1;
        const int trials = 10_000;
        var map = TestSites.Square();
        var truth = new Vector3D(5, 5, 0);
        var rng = new Random(51);
        var normal = new Normal(0, sigma, rng);
        var burst = new TdoaMeasurement[6];
        var errors = new double[trials, 2];
        var ranges = new double[4];
        for (var t = 0; t < trials; t++)
        {
            for (var i = 0; i < 4; i++)
            {
                ranges[i] = (truth - map[i].Position).Length + normal.Sample();
            }

            var k = 0;
            for (var a = 0; a < 4; a++)
            {
                for (var b = a + 1; b < 4; b++)
                {
                    burst[k++] = new TdoaMeasurement(0, a, b, ranges[b] - ranges[a]);
                }
            }

            var result = TdoaMultilateration.Solve(map, burst, PlanarLeastSquares);
            Assert.True(result.Converged);
            errors[t, 0] = result.Position.X - truth.X;
            errors[t, 1] = result.Position.Y - truth.Y;
        }

        var empirical = Matrix<double>.Build.Dense(2, 2);
        for (var t = 0; t < trials; t++)
        {
            for (var i = 0; i < 2; i++)
            {
                for (var j = 0; j < 2; j++)
                {
                    empirical[i, j] += errors[t, i] * errors[t, j] / trials;
                }
            }
        }

        var crlb = Crlb(map, truth, sigma);
        var samplingError = 3 * Math.Sqrt(2.0 / trials);
        output.WriteLine($"empirical/CRLB: x {empirical[0, 0] / crlb[0, 0]:F4}, y {empirical[1, 1] / crlb[1, 1]:F4}");
        for (var i = 0; i < 2; i++)
        {
            Assert.InRange(empirical[i, i] / crlb[i, i], 1 - samplingError, 1.10);
        }

        Assert.True(Math.Abs(empirical[0, 1]) < 0.1 * Math.Sqrt(crlb[0, 0] * crlb[1, 1]));
    }

    [Fact]
    public void Solve_ThreeDimensionalWithOutliers_RobustKernelsIgnoreThem()
    {
        // Eight-anchor hall, noise-free except three large positive excess delays: the M-estimators must land on
        // the truth while plain least squares is pulled away.
        var map = TestSites.Hall();
        var truth = new Vector3D(11.3, 6.7, 0.6);
        var list = new List<TdoaMeasurement>();
        var rng = new Random(52);
        for (var a = 0; a < 8; a++)
        {
            for (var b = a + 1; b < 8; b++)
            {
                var ddiff = TdoaMeasurementModel.Predict(truth, map[a].Position, map[a].AntennaDelayMetres, map[b].Position, map[b].AntennaDelayMetres);
                list.Add(new TdoaMeasurement(0, a, b, ddiff + (0.02 * (rng.NextDouble() - 0.5))));
            }
        }

        list[3] = list[3] with { DistanceDifference = list[3].DistanceDifference + 2.5 };
        list[10] = list[10] with { DistanceDifference = list[10].DistanceDifference + 1.7 };
        list[17] = list[17] with { DistanceDifference = list[17].DistanceDifference - 3.1 };
        foreach (var kernel in new[] { RobustKernel.Huber, RobustKernel.Cauchy, RobustKernel.Tukey })
        {
            var robust = TdoaMultilateration.Solve(map, list.ToArray(), new MultilaterationOptions { Kernel = kernel, SigmaMetres = 0.05 });
            Assert.True(robust.Converged);
            Assert.True((robust.Position - truth).Length < 0.1, $"{kernel}: {robust.Position}");
        }

        var plain = TdoaMultilateration.Solve(map, list.ToArray(), new MultilaterationOptions { Kernel = RobustKernel.LeastSquares, SigmaMetres = 0.05 });
        Assert.True((plain.Position - truth).Length > 0.2);
    }

    [Fact]
    public void Solve_TooFewPairs_ReportsStatusWithoutThrowing()
    {
        var map = TestSites.Square();
        TdoaMeasurement[] burst = [new(0, 0, 1, 1.0), new(0, 0, 1, 1.01), new(0, 1, 1, 0), new(0, 0, 9, 1), new(0, 0, 2, double.NaN)];
        var result = TdoaMultilateration.Solve(map, burst, PlanarLeastSquares);
        Assert.False(result.Converged);
        Assert.Equal(MultilaterationStatus.TooFewMeasurements, result.Status);
        Assert.Equal(2, result.MeasurementsUsed);
    }

    [Fact]
    public void Solve_ReportedCovariance_EqualsInverseNormalMatrixTimesSigmaSquared()
    {
        // Independent TDOA noise: covariance (JᵀJ)⁻¹σ²; J computed here with MathNet from the unit vectors.
        var map = TestSites.Square();
        var tag = new Vector3D(3, 4, 0);
        var burst = new TdoaMeasurement[3];
        var g = Matrix<double>.Build.Dense(3, 2);
        for (var b = 1; b < 4; b++)
        {
            burst[b - 1] = new TdoaMeasurement(0, 0, b, (tag - map[b].Position).Length - (tag - map[0].Position).Length);
            var ub = (tag - map[b].Position).Normalized();
            var ua = (tag - map[0].Position).Normalized();
            g[b - 1, 0] = ub.X - ua.X;
            g[b - 1, 1] = ub.Y - ua.Y;
        }

        var expected = (g.Transpose() * g).Inverse() * 0.01;
        var result = TdoaMultilateration.Solve(map, burst, PlanarLeastSquares);
        Assert.Equal(expected[0, 0], result.Covariance[0], 10);
        Assert.Equal(expected[0, 1], result.Covariance[1], 10);
        Assert.Equal(expected[1, 1], result.Covariance[4], 10);
        Assert.Equal(0.0, result.Covariance[8]);
    }

    /// <summary>(GᵀQ⁻¹G)⁻¹ with rows (u − sᵢ)/‖u − sᵢ‖ − (u − s₁)/‖u − s₁‖ and Q = σ²(I + 11ᵀ) (Chan &amp; Ho 1994), planar.</summary>
    internal static Matrix<double> Crlb(AnchorMap map, Vector3D tag, double sigma)
    {
        var m = map.Count - 1;
        var g = Matrix<double>.Build.Dense(m, 2);
        var u1 = (tag - map[0].Position).Normalized();
        for (var i = 1; i < map.Count; i++)
        {
            var ui = (tag - map[i].Position).Normalized();
            g[i - 1, 0] = ui.X - u1.X;
            g[i - 1, 1] = ui.Y - u1.Y;
        }

        var q = sigma * sigma * (Matrix<double>.Build.DenseIdentity(m) + Matrix<double>.Build.Dense(m, m, 1.0));
        return (g.Transpose() * q.Inverse() * g).Inverse();
    }
}
