using Fleet.Estimation.Filtering;
using MathNet.Numerics.Distributions;

namespace Fleet.Estimation.Tests.Filtering;

/// <summary>The χ² gate takes its threshold from MathNet's quantile; both are checked against the published table.</summary>
public class ChiSquareGateTests
{
    // NIST/SEMATECH e-Handbook of Statistical Methods, §1.3.6.7.4 "Critical Values of the Chi-Square Distribution".
    [Theory]
    [InlineData(1, 0.95, 3.841459)]
    [InlineData(1, 0.99, 6.634897)]
    [InlineData(2, 0.95, 5.991465)]
    [InlineData(2, 0.99, 9.210340)]
    [InlineData(3, 0.95, 7.814728)]
    [InlineData(3, 0.99, 11.344867)]
    [InlineData(6, 0.95, 12.591587)]
    [InlineData(6, 0.99, 16.811894)]
    [InlineData(9, 0.95, 16.918978)]
    [InlineData(9, 0.99, 21.665994)]
    public void InvCdf_TableQuantile_MatchesNistTable(int dof, double p, double table)
    {
        Assert.Equal(table, ChiSquared.InvCDF(dof, p), 3);
    }

    [Theory]
    [InlineData(0.5)]
    [InlineData(0.95)]
    [InlineData(0.999)]
    public void InvCdf_TwoDegrees_MatchesClosedForm(double p)
    {
        // χ²₂ is exponential with mean 2: quantile −2·ln(1 − p) (closed form).
        Assert.Equal(-2.0 * Math.Log(1 - p), ChiSquared.InvCDF(2, p), 9);
    }

    [Theory]
    [InlineData(0.95, 3.841459)]
    [InlineData(0.99, 6.634897)]
    public void GateThreshold_OneDegree_MatchesNistTable(double p, double table)
    {
        // NIST/SEMATECH e-Handbook §1.3.6.7.4, df = 1.
        var options = new FilterOptions { GateProbability = p };
        Assert.Equal(table, options.GateThreshold, 5);
    }

    [Fact]
    public void GateThreshold_OneDegree_IsSquaredNormalQuantile()
    {
        // For df = 1 the quantile is z²_{(1+p)/2} (CHECKS.md §1).
        var z = Normal.InvCDF(0, 1, (1 + 0.999) / 2);
        Assert.Equal(z * z, new FilterOptions().GateThreshold, 9);
    }
}
