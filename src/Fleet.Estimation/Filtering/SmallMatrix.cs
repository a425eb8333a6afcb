namespace Fleet.Estimation.Filtering;

/// <summary>Cholesky solve and inverse for small symmetric positive-definite matrices (n ≤ 8), row-major, allocation-free.</summary>
internal static class SmallMatrix
{
    /// <summary>Cholesky factor L (lower, row-major) of a; false when a is not positive definite.</summary>
    public static bool TryCholesky(ReadOnlySpan<double> a, int n, Span<double> l)
    {
        l[..(n * n)].Clear();
        for (var i = 0; i < n; i++)
        {
            for (var j = 0; j <= i; j++)
            {
                var s = a[(i * n) + j];
                for (var k = 0; k < j; k++)
                {
                    s -= l[(i * n) + k] * l[(j * n) + k];
                }

                if (i == j)
                {
                    if (!(s > 0) || !double.IsFinite(s))
                    {
                        return false;
                    }

                    l[(i * n) + i] = Math.Sqrt(s);
                }
                else
                {
                    l[(i * n) + j] = s / l[(j * n) + j];
                }
            }
        }

        return true;
    }

    /// <summary>Solves a·x = b for symmetric positive-definite a; false when a is not positive definite.</summary>
    public static bool TrySolveSymmetric(ReadOnlySpan<double> a, ReadOnlySpan<double> b, int n, Span<double> x)
    {
        Span<double> l = stackalloc double[64];
        if (!TryCholesky(a, n, l))
        {
            return false;
        }

        Span<double> y = stackalloc double[8];
        for (var i = 0; i < n; i++)
        {
            var s = b[i];
            for (var k = 0; k < i; k++)
            {
                s -= l[(i * n) + k] * y[k];
            }

            y[i] = s / l[(i * n) + i];
        }

        for (var i = n - 1; i >= 0; i--)
        {
            var s = y[i];
            for (var k = i + 1; k < n; k++)
            {
                s -= l[(k * n) + i] * x[k];
            }

            x[i] = s / l[(i * n) + i];
        }

        return true;
    }

    /// <summary>Inverse of a symmetric positive-definite a; false when a is not positive definite.</summary>
    public static bool TryInvertSymmetric(ReadOnlySpan<double> a, int n, Span<double> inverse)
    {
        Span<double> e = stackalloc double[8];
        Span<double> col = stackalloc double[8];
        for (var j = 0; j < n; j++)
        {
            e[..n].Clear();
            e[j] = 1;
            if (!TrySolveSymmetric(a, e, n, col))
            {
                return false;
            }

            for (var i = 0; i < n; i++)
            {
                inverse[(i * n) + j] = col[i];
            }
        }

        return true;
    }
}
