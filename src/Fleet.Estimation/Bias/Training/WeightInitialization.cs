namespace Fleet.Estimation.Bias.Training;

/// <summary>Random weight initialisers for fully-connected layers. Deterministic for a given <see cref="Random"/>.</summary>
public static class WeightInitialization
{
    /// <summary>
    /// Glorot/Xavier uniform: U[−√(6/(nᵢₙ+nₒᵤₜ)), +√(6/(nᵢₙ+nₒᵤₜ))], variance 2/(nᵢₙ+nₒᵤₜ).
    /// Glorot &amp; Bengio, "Understanding the difficulty of training deep feedforward neural networks", AISTATS 2010.
    /// Suited to symmetric saturating activations (tanh) and linear output layers.
    /// </summary>
    public static void GlorotUniform(Span<double> weights, int fanIn, int fanOut, Random random)
    {
        ArgumentNullException.ThrowIfNull(random);
        ArgumentOutOfRangeException.ThrowIfNegativeOrZero(fanIn + fanOut);
        var bound = Math.Sqrt(6.0 / (fanIn + fanOut));
        for (var i = 0; i < weights.Length; i++)
        {
            weights[i] = ((2.0 * random.NextDouble()) - 1.0) * bound;
        }
    }

    /// <summary>
    /// He normal: N(0, 2/nᵢₙ). He et al., "Delving deep into rectifiers", ICCV 2015. Suited to ReLU-like activations (SiLU).
    /// Normal draws by the Box–Muller transform.
    /// </summary>
    public static void HeNormal(Span<double> weights, int fanIn, Random random)
    {
        ArgumentNullException.ThrowIfNull(random);
        ArgumentOutOfRangeException.ThrowIfNegativeOrZero(fanIn);
        var std = Math.Sqrt(2.0 / fanIn);
        for (var i = 0; i < weights.Length; i += 2)
        {
            // 1 − U keeps the logarithm's argument in (0, 1].
            var radius = Math.Sqrt(-2.0 * Math.Log(1.0 - random.NextDouble()));
            var angle = 2.0 * Math.PI * random.NextDouble();
            weights[i] = std * radius * Math.Cos(angle);
            if (i + 1 < weights.Length)
            {
                weights[i + 1] = std * radius * Math.Sin(angle);
            }
        }
    }
}
