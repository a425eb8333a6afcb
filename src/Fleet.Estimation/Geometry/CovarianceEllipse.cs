namespace Fleet.Estimation.Geometry;

/// <summary>
/// The k-σ ellipse of a 2-D Gaussian: the points p with (p − μ)ᵀ C⁻¹ (p − μ) = k² for the 2×2 covariance
/// C = [[xx, xy], [xy, yy]] (m²). Its semi-axes are k·√λ₁ and k·√λ₂ along C's eigenvectors.
/// <para>
/// "1-σ" and "2-σ" name the Mahalanobis distance k, not a probability: for two dimensions (x − μ)ᵀC⁻¹(x − μ)
/// is chi-square with 2 degrees of freedom, whose CDF is 1 − e^(−k²/2), so the 1-σ ellipse holds 39.3 % of
/// the probability and the 2-σ ellipse 86.5 % (not the 68.3 % / 95.4 % of the 1-D rule).
/// A 95 % ellipse needs k = √(−2 ln 0.05) ≈ 2.448.
/// </para>
/// </summary>
/// <param name="SemiMajor">Semi-major axis (m for a covariance in m²); ≥ <paramref name="SemiMinor"/>.</param>
/// <param name="SemiMinor">Semi-minor axis (same unit).</param>
/// <param name="AngleRadians">Direction of the major axis from +x towards +y, in (−π/2, π/2].</param>
public readonly record struct CovarianceEllipse(double SemiMajor, double SemiMinor, double AngleRadians)
{
    /// <summary>False when the covariance was not finite or not positive semi-definite (all fields NaN then).</summary>
    public bool IsValid => double.IsFinite(SemiMajor) && double.IsFinite(SemiMinor) && double.IsFinite(AngleRadians);

    /// <summary>
    /// The k-σ ellipse (<paramref name="k"/> = Mahalanobis distance, default 1) of the covariance [[xx, xy], [xy, yy]].
    /// Closed-form eigen-decomposition of a symmetric 2×2 matrix: λ = m ± √(((xx − yy)/2)² + xy²) with
    /// m = (xx + yy)/2, major axis at ½·atan2(2xy, xx − yy). A slightly negative λ₂ from rounding (|λ₂| ≤ 1e-12·λ₁)
    /// is read as 0; a clearly indefinite or non-finite matrix gives an invalid (NaN) ellipse.
    /// </summary>
    public static CovarianceEllipse FromCovariance(double xx, double xy, double yy, double k = 1.0)
    {
        if (!double.IsFinite(xx) || !double.IsFinite(xy) || !double.IsFinite(yy) || !double.IsFinite(k) || k < 0)
        {
            return Invalid;
        }

        var mean = 0.5 * (xx + yy);
        var half = 0.5 * (xx - yy);
        var radius = Math.Sqrt((half * half) + (xy * xy));
        var major = mean + radius;
        var minor = mean - radius;
        if (minor < 0)
        {
            if (minor < -1e-12 * Math.Max(Math.Abs(major), double.Epsilon))
            {
                return Invalid;
            }

            minor = 0;
        }

        if (major < 0)
        {
            return Invalid;
        }

        // atan2(0, 0) is 0: a circle has no preferred direction.
        var angle = 0.5 * Math.Atan2(2 * xy, xx - yy);
        return new CovarianceEllipse(k * Math.Sqrt(major), k * Math.Sqrt(minor), angle);
    }

    /// <summary>Probability that a 2-D Gaussian sample falls inside its k-σ ellipse: 1 − e^(−k²/2) (chi-square, 2 dof).</summary>
    public static double ProbabilityInside(double k) => -double.ExpM1(-0.5 * k * k);

    /// <summary>The Mahalanobis distance k whose ellipse holds probability <paramref name="probability"/> in (0, 1): √(−2 ln(1 − p)).</summary>
    public static double ScaleForProbability(double probability)
    {
        if (!(probability > 0 && probability < 1))
        {
            throw new ArgumentOutOfRangeException(nameof(probability), probability, "must lie strictly between 0 and 1");
        }

        return Math.Sqrt(-2 * double.LogP1(-probability));
    }

    /// <summary>The same ellipse with both axes multiplied by <paramref name="factor"/> (e.g. 2 turns 1-σ into 2-σ).</summary>
    public CovarianceEllipse Scaled(double factor) => this with { SemiMajor = SemiMajor * factor, SemiMinor = SemiMinor * factor };

    private static CovarianceEllipse Invalid => new(double.NaN, double.NaN, double.NaN);
}
