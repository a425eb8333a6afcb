using System.Runtime.CompilerServices;

namespace Fleet.Estimation.Filtering;

/// <summary>
/// Weight and loss functions of the M-estimators used by the filter and the multilateration solver.
/// The argument <c>u</c> is the residual already divided by the tuning constant and the scale: u = r / (c·s).
/// Formulas after Z. Zhang (1997), "Parameter estimation techniques: a tutorial with application to conic fitting",
/// and P. J. Huber, <i>Robust Statistics</i> (from memory); constants give 95 % efficiency at the normal distribution.
/// </summary>
public static class RobustKernels
{
    /// <summary>Huber tuning constant for 95 % efficiency at the normal (exact root 1.3449975).</summary>
    public const double HuberConstant = 1.345;

    /// <summary>Cauchy tuning constant for 95 % efficiency at the normal (root 2.384947).</summary>
    public const double CauchyConstant = 2.385;

    /// <summary>Tukey biweight tuning constant for 95 % efficiency at the normal (root 4.68506).</summary>
    public const double TukeyConstant = 4.685;

    /// <summary>Scale factor turning a median absolute deviation into a standard deviation at the normal: 1/Φ⁻¹(0.75).</summary>
    public const double MadToSigma = 1.482602;

    /// <summary>The standard 95 %-efficiency constant of <paramref name="kernel"/>; +∞ for least squares.</summary>
    public static double StandardConstant(RobustKernel kernel) => kernel switch
    {
        RobustKernel.Huber => HuberConstant,
        RobustKernel.Cauchy => CauchyConstant,
        RobustKernel.Tukey => TukeyConstant,
        _ => double.PositiveInfinity,
    };

    /// <summary>
    /// IRLS weight w(u) = ψ(u)/u in [0, 1]. Least squares always gives 1. A NaN argument gives 0 for the robust
    /// kernels (the measurement is ignored) and 1 for least squares.
    /// </summary>
    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static double Weight(RobustKernel kernel, double u)
    {
        switch (kernel)
        {
            case RobustKernel.LeastSquares:
                return 1.0;
            case RobustKernel.Huber:
                {
                    var a = Math.Abs(u);
                    return a <= 1.0 ? 1.0 : (a < double.PositiveInfinity ? 1.0 / a : 0.0);
                }

            case RobustKernel.Cauchy:
                {
                    var w = 1.0 / (1.0 + (u * u));
                    return double.IsNaN(w) ? 0.0 : w;
                }

            case RobustKernel.Tukey:
                {
                    var a = Math.Abs(u);
                    if (!(a < 1.0))
                    {
                        return 0.0;
                    }

                    var t = 1.0 - (u * u);
                    return t * t;
                }

            default:
                return 1.0;
        }
    }

    /// <summary>
    /// Loss ρ(u) with ρ′(u) = u·w(u) and ρ(0) = 0, in units of c² (multiply by (c·s)² for squared metres).
    /// Least squares: u²/2; Huber: u²/2 inside, |u| − ½ outside; Cauchy: ½·ln(1+u²); Tukey: (1 − (1−u²)³)/6, capped at 1/6.
    /// </summary>
    public static double Loss(RobustKernel kernel, double u)
    {
        var a = Math.Abs(u);
        switch (kernel)
        {
            case RobustKernel.Huber:
                return a <= 1.0 ? 0.5 * u * u : a - 0.5;
            case RobustKernel.Cauchy:
                return 0.5 * Math.Log(1.0 + (u * u));
            case RobustKernel.Tukey:
                {
                    if (!(a < 1.0))
                    {
                        return 1.0 / 6.0;
                    }

                    var t = 1.0 - (u * u);
                    return (1.0 - (t * t * t)) / 6.0;
                }

            default:
                return 0.5 * u * u;
        }
    }
}
