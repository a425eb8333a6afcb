using System.Runtime.CompilerServices;
namespace Fleet.Estimation.Filtering;

/// <summary>
/// Allocation-free linear Kalman building blocks on row-major spans of dimension n (n ≤ 8).
/// The filter and the textbook tests share this code, so the tests exercise what runs in production.
/// </summary>
internal static class KalmanMath
{
    public const int MaxDimension = 8;

    /// <summary>x ← F·x and P ← F·P·Fᵀ + Q, then P is symmetrised.</summary>
    public static void Predict(Span<double> x, Span<double> p, ReadOnlySpan<double> f, ReadOnlySpan<double> q, int n)
    {
        Span<double> tmp = stackalloc double[MaxDimension];
        for (var i = 0; i < n; i++)
        {
            var s = 0.0;
            for (var j = 0; j < n; j++)
            {
                s += f[(i * n) + j] * x[j];
            }

            tmp[i] = s;
        }

        tmp[..n].CopyTo(x);
        PredictCovariance(p, f, q, n);
    }

    /// <summary>P ← F·P·Fᵀ + Q, symmetrised.</summary>
    public static void PredictCovariance(Span<double> p, ReadOnlySpan<double> f, ReadOnlySpan<double> q, int n)
    {
        Span<double> fp = stackalloc double[MaxDimension * MaxDimension];
        for (var i = 0; i < n; i++)
        {
            for (var j = 0; j < n; j++)
            {
                var s = 0.0;
                for (var k = 0; k < n; k++)
                {
                    s += f[(i * n) + k] * p[(k * n) + j];
                }

                fp[(i * n) + j] = s;
            }
        }

        for (var i = 0; i < n; i++)
        {
            for (var j = i; j < n; j++)
            {
                var s = 0.0;
                for (var k = 0; k < n; k++)
                {
                    s += fp[(i * n) + k] * f[(j * n) + k];
                }

                s += 0.5 * (q[(i * n) + j] + q[(j * n) + i]);
                p[(i * n) + j] = s;
                p[(j * n) + i] = s;
            }
        }
    }

    /// <summary>ph ← P·hᵀ; returns h·P·hᵀ (the innovation variance without measurement noise).</summary>
    public static double ProjectCovariance(ReadOnlySpan<double> p, ReadOnlySpan<double> h, Span<double> ph, int n)
    {
        var hph = 0.0;
        for (var i = 0; i < n; i++)
        {
            var s = 0.0;
            for (var j = 0; j < n; j++)
            {
                s += p[(i * n) + j] * h[j];
            }

            ph[i] = s;
            hph += h[i] * s;
        }

        return hph;
    }

    /// <summary>
    /// Scalar measurement update with the optimal gain, covariance in Joseph form.
    /// Returns the innovation variance S = h·P·hᵀ + r, or NaN (and leaves x, P untouched) when S is not positive and finite.
    /// </summary>
    public static double UpdateScalar(Span<double> x, Span<double> p, ReadOnlySpan<double> h, double innovation, double r, int n)
    {
        Span<double> ph = stackalloc double[MaxDimension];
        Span<double> k = stackalloc double[MaxDimension];
        var s = ProjectCovariance(p, h, ph, n) + r;
        if (!(s > 0) || !double.IsFinite(s))
        {
            return double.NaN;
        }

        for (var i = 0; i < n; i++)
        {
            k[i] = ph[i] / s;
            x[i] += k[i] * innovation;
        }

        JosephUpdate(p, h, k, r, n);
        return s;
    }

    /// <summary>
    /// Joseph-form covariance update P ← (I − k·h)·P·(I − k·h)ᵀ + r·k·kᵀ for any gain k (optimal or not),
    /// after Bucy &amp; Joseph (1968) (from memory). Keeps P symmetric positive semi-definite under round-off.
    /// Computed in O(n²) by <see cref="JosephUpdateScalar"/>.
    /// </summary>
    public static void JosephUpdate(Span<double> p, ReadOnlySpan<double> h, ReadOnlySpan<double> k, double r, int n)
    {
        Span<double> ph = stackalloc double[MaxDimension];
        var hph = ProjectCovariance(p, h, ph, n);
        JosephUpdateScalar(p, ph, hph, k, r, n);
    }

    /// <summary>
    /// The Joseph form for a scalar measurement, expanded: with ph = P·hᵀ and hph = h·P·hᵀ of the prior P,
    /// (I − k·h)·P·(I − k·h)ᵀ + r·k·kᵀ = P − k·phᵀ − ph·kᵀ + (hph + r)·k·kᵀ (P symmetric). Each entry is formed
    /// once for i ≤ j and mirrored, so the result is exactly symmetric; O(n²) instead of the dense O(n³).
    /// Valid for any gain k.
    /// </summary>
    [MethodImpl(MethodImplOptions.AggressiveOptimization)]
    public static void JosephUpdateScalar(Span<double> p, ReadOnlySpan<double> ph, double hph, ReadOnlySpan<double> k, double r, int n)
    {
        var sk = hph + r;
        for (var i = 0; i < n; i++)
        {
            var ki = k[i];
            var phi = ph[i];
            var row = i * n;
            for (var j = i; j < n; j++)
            {
                var v = p[row + j] - (ki * ph[j]) - (phi * k[j]) + (sk * ki * k[j]);
                p[row + j] = v;
                p[(j * n) + i] = v;
            }
        }
    }

    /// <summary>P ← (P + Pᵀ)/2, exactly symmetric afterwards.</summary>
    public static void Symmetrize(Span<double> p, int n)
    {
        for (var i = 0; i < n; i++)
        {
            for (var j = i + 1; j < n; j++)
            {
                var m = 0.5 * (p[(i * n) + j] + p[(j * n) + i]);
                p[(i * n) + j] = m;
                p[(j * n) + i] = m;
            }
        }
    }

    /// <summary>True when every diagonal entry is positive and finite (a cheap per-update check; see <see cref="IsUsableCovariance"/>).</summary>
    public static bool HasUsableDiagonal(ReadOnlySpan<double> p, int n)
    {
        for (var i = 0; i < n; i++)
        {
            var d = p[(i * n) + i];
            if (!(d > 0) || !double.IsFinite(d))
            {
                return false;
            }
        }

        return true;
    }

    /// <summary>True when every entry is finite and every diagonal entry is positive.</summary>
    public static bool IsUsableCovariance(ReadOnlySpan<double> p, int n)
    {
        for (var i = 0; i < n * n; i++)
        {
            if (!double.IsFinite(p[i]))
            {
                return false;
            }
        }

        for (var i = 0; i < n; i++)
        {
            if (!(p[(i * n) + i] > 0))
            {
                return false;
            }
        }

        return true;
    }
}
