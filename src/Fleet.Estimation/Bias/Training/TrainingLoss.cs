using Fleet.Estimation.Filtering;

namespace Fleet.Estimation.Bias.Training;

/// <summary>
/// Per-sample loss ρ(r) on a TDOA residual r (m) with threshold c = k·σ (σ a robust residual scale).
/// All kernels equal r²/2 near zero, so their magnitudes are comparable:
/// least squares r²/2; Huber r²/2 for |r| ≤ c else c|r| − c²/2; Cauchy (c²/2)·ln(1 + (r/c)²);
/// Tukey biweight (c²/6)·(1 − (1 − (r/c)²)³) for |r| &lt; c else c²/6.
/// Formulas: P. J. Huber, Robust Statistics (1981); Z. Zhang (1997), Image Vision Comput. 15(1) (from memory).
/// </summary>
public readonly record struct TrainingLoss(RobustKernel Kernel, double Threshold)
{
    /// <summary>Tuning constant k for 95 % efficiency at the normal (CHECKS.md §2; MathWorks robustfit defaults).</summary>
    public static double DefaultTuning(RobustKernel kernel) => kernel switch
    {
        RobustKernel.Huber => 1.345,
        RobustKernel.Cauchy => 2.385,
        RobustKernel.Tukey => 4.685,
        _ => double.PositiveInfinity,
    };

    /// <summary>ρ(r).</summary>
    public double Rho(double r)
    {
        var c = Threshold;
        switch (Kernel)
        {
            case RobustKernel.Huber:
                var abs = Math.Abs(r);
                return abs <= c ? 0.5 * r * r : (c * abs) - (0.5 * c * c);
            case RobustKernel.Cauchy:
                var u = r / c;
                return 0.5 * c * c * Math.Log(1 + (u * u));
            case RobustKernel.Tukey:
                var t = r / c;
                if (Math.Abs(t) >= 1)
                {
                    return c * c / 6.0;
                }

                var s = 1 - (t * t);
                return c * c / 6.0 * (1 - (s * s * s));
            default:
                return 0.5 * r * r;
        }
    }

    /// <summary>ψ(r) = dρ/dr.</summary>
    public double Psi(double r)
    {
        var c = Threshold;
        switch (Kernel)
        {
            case RobustKernel.Huber:
                return Math.Clamp(r, -c, c);
            case RobustKernel.Cauchy:
                var u = r / c;
                return r / (1 + (u * u));
            case RobustKernel.Tukey:
                var t = r / c;
                if (Math.Abs(t) >= 1)
                {
                    return 0;
                }

                var s = 1 - (t * t);
                return r * s * s;
            default:
                return r;
        }
    }
}
