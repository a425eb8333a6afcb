using Fleet.Estimation.Filtering;
using MathNet.Numerics;

namespace Fleet.Estimation.Tests.Filtering;

/// <summary>Kernel weights at exact points and the 95 % efficiency of the standard constants (CHECKS.md §2).</summary>
public class RobustKernelTests
{
    [Fact]
    public void Weight_ExactPoints_MatchClosedForms()
    {
        // Closed forms (Zhang 1997, from memory; MathWorks robustfit documentation): u = r / (c·s).
        Assert.Equal(0.5, RobustKernels.Weight(RobustKernel.Huber, 2.0), 12);
        Assert.Equal(1.0, RobustKernels.Weight(RobustKernel.Huber, 0.7), 12);
        Assert.Equal(0.5625, RobustKernels.Weight(RobustKernel.Tukey, 0.5), 12);
        Assert.Equal(0.0, RobustKernels.Weight(RobustKernel.Tukey, 1.0), 12);
        Assert.Equal(0.5, RobustKernels.Weight(RobustKernel.Cauchy, 1.0), 12);
        Assert.Equal(1.0, RobustKernels.Weight(RobustKernel.LeastSquares, 1e6), 12);
    }

    [Fact]
    public void Weight_NonFiniteArgument_IsZeroForRobustKernels()
    {
        foreach (var k in new[] { RobustKernel.Huber, RobustKernel.Cauchy, RobustKernel.Tukey })
        {
            Assert.Equal(0.0, RobustKernels.Weight(k, double.NaN));
            Assert.Equal(0.0, RobustKernels.Weight(k, double.PositiveInfinity));
        }
    }

    [Fact]
    public void Constants_AreTheStandardValues()
    {
        // MathWorks robustfit defaults (huber 1.345, cauchy 2.385, bisquare 4.685); CHECKS.md §2.
        Assert.Equal(1.345, RobustKernels.HuberConstant);
        Assert.Equal(2.385, RobustKernels.CauchyConstant);
        Assert.Equal(4.685, RobustKernels.TukeyConstant);
        Assert.Equal(1.0 / 0.6744898, RobustKernels.MadToSigma, 6);
    }

    [Theory]
    [InlineData(RobustKernel.Huber, RobustKernels.HuberConstant)]
    [InlineData(RobustKernel.Cauchy, RobustKernels.CauchyConstant)]
    [InlineData(RobustKernel.Tukey, RobustKernels.TukeyConstant)]
    public void Efficiency_StandardConstant_IsNinetyFivePercent(RobustKernel kernel, double c)
    {
        // eff = (E[ψ′])² / E[ψ²] at Z ~ N(0,1) (Huber 1981, from memory). With ψ continuous, integration by
        // parts gives E[ψ′] = E[Z·ψ(Z)], so no derivative is needed. ψ(x) = x·w(x/c).
        double Phi(double x) => Math.Exp(-0.5 * x * x) / Math.Sqrt(2 * Math.PI);
        double Psi(double x) => x * RobustKernels.Weight(kernel, x / c);
        var e1 = Integrate.OnClosedInterval(x => x * Psi(x) * Phi(x), -12, 12);
        var e2 = Integrate.OnClosedInterval(x => Psi(x) * Psi(x) * Phi(x), -12, 12);
        Assert.InRange(e1 * e1 / e2, 0.95 - 5e-4, 0.95 + 5e-4);
    }

    [Fact]
    public void Efficiency_HuberClosedForm_MatchesIntegral()
    {
        // Closed form (CHECKS.md §2): E[ψ′] = 2Φ(k)−1, E[ψ²] = 2Φ(k)−1−2kφ(k)+2k²(1−Φ(k)); k = 1.345 → 0.9500003.
        const double k = RobustKernels.HuberConstant;
        var cdf = MathNet.Numerics.Distributions.Normal.CDF(0, 1, k);
        var pdf = MathNet.Numerics.Distributions.Normal.PDF(0, 1, k);
        var a = (2 * cdf) - 1;
        var b = (2 * cdf) - 1 - (2 * k * pdf) + (2 * k * k * (1 - cdf));
        Assert.Equal(0.9500003, a * a / b, 6);
    }

    [Theory]
    [InlineData(RobustKernel.LeastSquares)]
    [InlineData(RobustKernel.Huber)]
    [InlineData(RobustKernel.Cauchy)]
    [InlineData(RobustKernel.Tukey)]
    public void Loss_DerivativeEqualsUTimesWeight(RobustKernel kernel)
    {
        // ρ′(u) = ψ(u) = u·w(u) by definition of the IRLS weight; centred difference, h = 1e-6.
        foreach (var u in new[] { -3.0, -0.9, -0.2, 0.3, 0.8, 1.7, 4.0 })
        {
            var numeric = (RobustKernels.Loss(kernel, u + 1e-6) - RobustKernels.Loss(kernel, u - 1e-6)) / 2e-6;
            Assert.Equal(u * RobustKernels.Weight(kernel, u), numeric, 6);
        }
    }
}
