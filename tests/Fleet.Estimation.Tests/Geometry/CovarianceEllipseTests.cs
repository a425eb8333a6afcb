using Fleet.Estimation.Geometry;
using MathNet.Numerics.Distributions;
using MathNet.Numerics.LinearAlgebra;

namespace Fleet.Estimation.Tests.Geometry;

public class CovarianceEllipseTests
{
    // Reference: MathNet.Numerics' symmetric eigen-decomposition (Evd) of the same 2×2 covariance; the k-σ ellipse
    // has semi-axes k·√λ along the eigenvectors (any multivariate statistics text, e.g. Johnson & Wichern,
    // Applied Multivariate Statistical Analysis, §4.2 — from memory).
    [Fact]
    public void FromCovariance_RandomSpdMatrices_MatchesMathNetEigenDecomposition()
    {
        var random = new Random(20240607);
        for (var trial = 0; trial < 500; trial++)
        {
            var a = Matrix<double>.Build.Dense(2, 2, (_, _) => (random.NextDouble() * 2) - 1);
            var covariance = (a * a.Transpose()) + (1e-4 * Matrix<double>.Build.DenseIdentity(2));
            var k = 0.5 + (random.NextDouble() * 2.5);

            var ellipse = CovarianceEllipse.FromCovariance(covariance[0, 0], covariance[0, 1], covariance[1, 1], k);

            var evd = covariance.Evd(Symmetricity.Symmetric);
            var lambdas = evd.EigenValues.Select(c => c.Real).ToArray();
            var majorIndex = lambdas[0] >= lambdas[1] ? 0 : 1;
            var major = lambdas[majorIndex];
            var minor = lambdas[1 - majorIndex];
            Assert.True(ellipse.IsValid);
            Assert.Equal(k * Math.Sqrt(major), ellipse.SemiMajor, 1e-9);
            Assert.Equal(k * Math.Sqrt(minor), ellipse.SemiMinor, 1e-9);

            // The major axis direction is MathNet's eigenvector up to sign: the cross product vanishes.
            var v = evd.EigenVectors.Column(majorIndex);
            var cross = (Math.Cos(ellipse.AngleRadians) * v[1]) - (Math.Sin(ellipse.AngleRadians) * v[0]);
            if (major - minor > 1e-6 * major)
            {
                Assert.Equal(0.0, cross, 1e-6);
            }

            Assert.InRange(ellipse.AngleRadians, -Math.PI / 2, Math.PI / 2);
        }
    }

    // Probability content of the k-σ ellipse of a 2-D Gaussian = chi-square CDF with 2 dof at k²
    // (MathNet ChiSquared.CDF as the reference; 39.3 % and 86.5 % are the textbook values, e.g. Johnson & Wichern
    // §4.2 / any table of χ²₂ — from memory; CHECKS.md §1 gives χ²₂(0.95) = 5.991465 [V, NIST]).
    [Theory]
    [InlineData(1.0, 0.3935)]
    [InlineData(2.0, 0.8647)]
    [InlineData(3.0, 0.9889)]
    public void ProbabilityInside_SigmaScale_EqualsChiSquareTwoDof(double k, double published)
    {
        Assert.Equal(ChiSquared.CDF(2, k * k), CovarianceEllipse.ProbabilityInside(k), 1e-12);
        Assert.Equal(published, CovarianceEllipse.ProbabilityInside(k), 4);
    }

    [Fact]
    public void ScaleForProbability_NinetyFivePercent_IsRootOfChiSquareQuantile()
    {
        // CHECKS.md §1: χ²₂ quantile at 0.95 is 5.991465 (NIST/SEMATECH e-Handbook §1.3.6.7.4), so k = √5.991465.
        Assert.Equal(Math.Sqrt(5.991465), CovarianceEllipse.ScaleForProbability(0.95), 6);
        Assert.Equal(Math.Sqrt(ChiSquared.InvCDF(2, 0.95)), CovarianceEllipse.ScaleForProbability(0.95), 9);
    }

    // End to end: seeded samples of N(0, C) (MathNet's Cholesky factor and its Normal sampler, independent of the
    // code under test) fall inside the drawn 1-σ and 2-σ ellipses at the chi-square rates.
    [Fact]
    public void FromCovariance_SampledGaussian_FractionsInsideMatchChiSquare()
    {
        var covariance = Matrix<double>.Build.DenseOfArray(new[,] { { 0.09, 0.05 }, { 0.05, 0.04 } });
        var factor = covariance.Cholesky().Factor;
        var normal = new Normal(0, 1, new Random(7));
        const int n = 200_000;
        var one = CovarianceEllipse.FromCovariance(covariance[0, 0], covariance[0, 1], covariance[1, 1]);
        var two = one.Scaled(2);
        int insideOne = 0, insideTwo = 0;
        for (var i = 0; i < n; i++)
        {
            var z = Vector<double>.Build.Dense([normal.Sample(), normal.Sample()]);
            var p = factor * z;
            insideOne += Inside(one, p[0], p[1]) ? 1 : 0;
            insideTwo += Inside(two, p[0], p[1]) ? 1 : 0;
        }

        // Binomial standard error at n = 200 000 is about 0.0011; allow 4 of them.
        Assert.Equal(ChiSquared.CDF(2, 1), (double)insideOne / n, 0.0045);
        Assert.Equal(ChiSquared.CDF(2, 4), (double)insideTwo / n, 0.0045);
    }

    [Theory]
    [InlineData(double.NaN, 0, 1)]
    [InlineData(1, double.PositiveInfinity, 1)]
    [InlineData(1, 2, 1)] // indefinite: eigenvalues 3 and −1
    [InlineData(-1, 0, -1)]
    public void FromCovariance_NotACovariance_IsInvalid(double xx, double xy, double yy)
    {
        var ellipse = CovarianceEllipse.FromCovariance(xx, xy, yy);

        Assert.False(ellipse.IsValid);
    }

    [Fact]
    public void FromCovariance_SingularButPositiveSemiDefinite_HasZeroMinorAxis()
    {
        // [[1, 1], [1, 1]] has eigenvalues 2 and 0 with the major axis along 45° (closed form).
        var ellipse = CovarianceEllipse.FromCovariance(1, 1, 1);

        Assert.True(ellipse.IsValid);
        Assert.Equal(Math.Sqrt(2), ellipse.SemiMajor, 1e-12);
        Assert.Equal(0.0, ellipse.SemiMinor, 1e-12);
        Assert.Equal(Math.PI / 4, ellipse.AngleRadians, 1e-12);
    }

    private static bool Inside(CovarianceEllipse e, double x, double y)
    {
        var c = Math.Cos(e.AngleRadians);
        var s = Math.Sin(e.AngleRadians);
        var u = (c * x) + (s * y);
        var v = (-s * x) + (c * y);
        return ((u * u) / (e.SemiMajor * e.SemiMajor)) + ((v * v) / (e.SemiMinor * e.SemiMinor)) <= 1;
    }
}
