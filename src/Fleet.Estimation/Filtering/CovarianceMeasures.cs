namespace Fleet.Estimation.Filtering;

/// <summary>Scalar summaries of a row-major covariance matrix whose first two axes are site x and y.</summary>
public static class CovarianceMeasures
{
    /// <summary>
    /// Largest standard deviation (m) of the 2×2 horizontal block of the <paramref name="n"/>×<paramref name="n"/>
    /// covariance <paramref name="p"/>: the square root of its larger eigenvalue, closed form for a symmetric 2×2.
    /// A negative eigenvalue (numerical noise) gives 0; NaN entries give NaN.
    /// </summary>
    public static double HorizontalSigma(ReadOnlySpan<double> p, int n)
    {
        var a = p[0];
        var b = p[1];
        var d = p[n + 1];
        var half = 0.5 * (a + d);
        var disc = Math.Sqrt((0.25 * (a - d) * (a - d)) + (b * b));
        return Math.Sqrt(Math.Max(0, half + disc));
    }
}
