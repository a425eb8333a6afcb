using Fleet.Estimation.Bias;
using Fleet.Estimation.Bias.Training;
using Fleet.Estimation.Filtering;

namespace Fleet.Estimation.Tests.Bias;

public class BiasTrainingMathTests
{
    [Theory]
    [InlineData(BiasActivation.Tanh, RobustKernel.Cauchy)]
    [InlineData(BiasActivation.SiLU, RobustKernel.Cauchy)]
    [InlineData(BiasActivation.Tanh, RobustKernel.LeastSquares)]
    [InlineData(BiasActivation.SiLU, RobustKernel.Tukey)]
    public void AccumulateGradient_EveryLayer_MatchesCentredFiniteDifferences(BiasActivation activation, RobustKernel kernel)
    {
        // CS231n "Neural Networks Part 3" gradient check (from memory): centred differences, h = 1e-5, double precision,
        // relative error |a − n| / max(|a|, |n|) below 1e-7 is good; we require < 1e-6 on every parameter of every layer.
        int[] sizes = [7, 6, 5, 4, 1];
        var kernelUnderTest = new MlpTrainingKernel(sizes, activation, 8);
        var random = new Random(42);
        var theta = new double[kernelUnderTest.ParameterCount];
        for (var i = 0; i < theta.Length; i++)
        {
            theta[i] = (random.NextDouble() * 2) - 1;
        }

        const int samples = 8;
        var features = new double[samples * 2 * 7];
        for (var i = 0; i < features.Length; i++)
        {
            features[i] = BiasTestData.Gaussian(random);
        }

        var targets = new double[samples];
        for (var i = 0; i < samples; i++)
        {
            targets[i] = 0.3 * BiasTestData.Gaussian(random);
        }

        int[] indices = [0, 1, 2, 3, 4, 5, 6, 7];
        var loss = new TrainingLoss(kernel, 0.25);
        const double scale = 0.2;
        var residuals = new double[samples];
        var analytic = new double[theta.Length];
        kernelUnderTest.AccumulateGradient(theta, features, indices, targets, scale, loss, analytic, residuals);

        // Entries far below the largest (e.g. the output bias, whose gradient cancels exactly in f(b) − f(a)) are
        // compared against 1e-4 of the largest entry instead of themselves: there a centred difference only sees
        // rounding noise of order ε·loss/h.
        var floor = 1e-4 * analytic.Max(Math.Abs);
        const double h = 1e-5;
        var ignored = new double[theta.Length];
        var worst = 0.0;
        var detail = string.Empty;
        for (var i = 0; i < theta.Length; i++)
        {
            var saved = theta[i];
            theta[i] = saved + h;
            var plus = kernelUnderTest.AccumulateGradient(theta, features, indices, targets, scale, loss, ignored, residuals);
            theta[i] = saved - h;
            var minus = kernelUnderTest.AccumulateGradient(theta, features, indices, targets, scale, loss, ignored, residuals);
            theta[i] = saved;
            var numeric = (plus - minus) / (2 * h);
            var denominator = Math.Max(Math.Max(Math.Abs(analytic[i]), Math.Abs(numeric)), floor);
            var error = Math.Abs(analytic[i] - numeric) / denominator;
            if (error > worst)
            {
                worst = error;
                detail = $"parameter {i}: analytic {analytic[i]:E6}, numeric {numeric:E6}";
            }
        }

        Assert.True(worst < 1e-6, $"worst relative gradient error {worst:E2} at {detail}");
    }

    [Fact]
    public void Step_FirstStepOnFixedGradient_IsAlphaGOverAbsGPlusEpsilon()
    {
        // Kingma & Ba 2015, Algorithm 1: after bias correction the first step is exactly α·g/(|g| + ε).
        // For g = 0.5 and the paper's defaults this is 9.9999998e-4 (CHECKS.md §7).
        var adam = new AdamOptimizer(4);
        double[] gradient = [0.5, -2.0, 1e-3, 0.0];
        var parameters = new double[4];
        adam.Step(parameters, gradient);

        Assert.Equal(-9.9999998e-4, parameters[0], 1e-12);
        for (var i = 0; i < gradient.Length; i++)
        {
            Assert.Equal(-1e-3 * gradient[i] / (Math.Abs(gradient[i]) + 1e-8), parameters[i], 1e-15);
        }
    }

    [Fact]
    public void GlorotUniform_MillionDraws_VarianceIsTwoOverFanInPlusFanOut()
    {
        // Glorot & Bengio, AISTATS 2010 (from memory): U[±√(6/(nin+nout))], Var = 2/(nin+nout). For 4→16: bound 0.547723, Var 0.1.
        var weights = new double[1_000_000];
        WeightInitialization.GlorotUniform(weights, 4, 16, new Random(7));
        var (mean, variance, maxAbs) = Moments(weights);

        Assert.True(maxAbs <= 0.547723, $"max |w| {maxAbs}");
        Assert.True(maxAbs > 0.5477, $"max |w| {maxAbs} should approach the bound");
        Assert.Equal(0.0, mean, 2e-3);
        Assert.True(Math.Abs(variance / 0.1 - 1) < 0.01, $"variance {variance}");
    }

    [Fact]
    public void HeNormal_MillionDraws_VarianceIsTwoOverFanIn()
    {
        // He et al., ICCV 2015 (from memory): N(0, 2/nin). For nin = 4: std 0.707107, Var 0.5.
        var weights = new double[1_000_000];
        WeightInitialization.HeNormal(weights, 4, new Random(8));
        var (mean, variance, _) = Moments(weights);

        Assert.Equal(0.0, mean, 3e-3);
        Assert.True(Math.Abs(variance / 0.5 - 1) < 0.01, $"variance {variance}");
        Assert.Equal(0.707107, Math.Sqrt(variance), 0.004);
    }

    [Fact]
    public void TrainingLoss_HuberAndCauchy_MatchCheckedWeights()
    {
        // CHECKS.md §2 weight function w(u) = ψ(r)/r at u = r/c: Huber w(2) = 0.5, Cauchy w(1) = 0.5, Tukey w(0.5) = 0.5625.
        Assert.Equal(0.5, new TrainingLoss(RobustKernel.Huber, 1.0).Psi(2.0) / 2.0, 1e-12);
        Assert.Equal(0.5, new TrainingLoss(RobustKernel.Cauchy, 1.0).Psi(1.0) / 1.0, 1e-12);
        Assert.Equal(0.5625, new TrainingLoss(RobustKernel.Tukey, 1.0).Psi(0.5) / 0.5, 1e-12);
    }

    private static (double Mean, double Variance, double MaxAbs) Moments(double[] values)
    {
        double sum = 0, maxAbs = 0;
        foreach (var v in values)
        {
            sum += v;
            maxAbs = Math.Max(maxAbs, Math.Abs(v));
        }

        var mean = sum / values.Length;
        var squares = 0.0;
        foreach (var v in values)
        {
            squares += (v - mean) * (v - mean);
        }

        return (mean, squares / values.Length, maxAbs);
    }
}
