namespace Fleet.Estimation.Bias.Training;

/// <summary>
/// Adam, as in Kingma &amp; Ba, "Adam: A Method for Stochastic Optimization", ICLR 2015, Algorithm 1:
/// m ← β₁m + (1−β₁)g, v ← β₂v + (1−β₂)g², m̂ = m/(1−β₁ᵗ), v̂ = v/(1−β₂ᵗ), θ ← θ − α·m̂/(√v̂ + ε).
/// Defaults α = 1e-3, β₁ = 0.9, β₂ = 0.999, ε = 1e-8 (the paper's). <see cref="Step"/> does not allocate.
/// </summary>
public sealed class AdamOptimizer
{
    private readonly double[] _m;
    private readonly double[] _v;
    private double _beta1Power = 1.0;
    private double _beta2Power = 1.0;

    public AdamOptimizer(int parameterCount, double learningRate = 1e-3, double beta1 = 0.9, double beta2 = 0.999, double epsilon = 1e-8)
    {
        ArgumentOutOfRangeException.ThrowIfNegative(parameterCount);
        if (!(learningRate > 0) || !(beta1 >= 0 && beta1 < 1) || !(beta2 >= 0 && beta2 < 1) || !(epsilon > 0))
        {
            throw new ArgumentException("Adam needs α > 0, 0 ≤ β₁, β₂ < 1 and ε > 0");
        }

        _m = new double[parameterCount];
        _v = new double[parameterCount];
        LearningRate = learningRate;
        Beta1 = beta1;
        Beta2 = beta2;
        Epsilon = epsilon;
    }

    public double LearningRate { get; }

    public double Beta1 { get; }

    public double Beta2 { get; }

    public double Epsilon { get; }

    /// <summary>Number of steps taken (t in the paper).</summary>
    public int StepCount { get; private set; }

    /// <summary>One update of <paramref name="parameters"/> in place, given the gradient of the loss.</summary>
    public void Step(Span<double> parameters, ReadOnlySpan<double> gradient)
    {
        if (parameters.Length != _m.Length || gradient.Length != _m.Length)
        {
            throw new ArgumentException($"expected {_m.Length} parameters and gradient entries");
        }

        StepCount++;
        _beta1Power *= Beta1;
        _beta2Power *= Beta2;
        var correction1 = 1.0 - _beta1Power;
        var correction2 = 1.0 - _beta2Power;
        for (var i = 0; i < parameters.Length; i++)
        {
            var g = gradient[i];
            _m[i] = (Beta1 * _m[i]) + ((1 - Beta1) * g);
            _v[i] = (Beta2 * _v[i]) + ((1 - Beta2) * g * g);
            var mHat = _m[i] / correction1;
            var vHat = _v[i] / correction2;
            parameters[i] -= LearningRate * mHat / (Math.Sqrt(vHat) + Epsilon);
        }
    }
}
