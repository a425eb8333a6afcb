using System.Runtime.CompilerServices;
namespace Fleet.Estimation.Filtering;

/// <summary>
/// 3-D constant-velocity process model, state (x, y, z, vx, vy, vz) in the site frame (m, m/s).
/// Continuous white-noise acceleration with power spectral density q (m²/s³) per axis gives, per axis,
/// Q = q·[[dt³/3, dt²/2], [dt²/2, dt]] (Bar-Shalom, Li &amp; Kirubarajan 2001, §6.2; from memory).
/// </summary>
public static class ConstantVelocityModel
{
    public const int StateDimension = 6;

    /// <summary>Transition matrix F (6×6 row-major) for a step of <paramref name="dt"/> seconds.</summary>
    public static void Transition(double dt, Span<double> f)
    {
        f[..36].Clear();
        for (var i = 0; i < 6; i++)
        {
            f[(i * 6) + i] = 1.0;
        }

        for (var i = 0; i < 3; i++)
        {
            f[(i * 6) + i + 3] = dt;
        }
    }

    /// <summary>
    /// Process noise Q (6×6 row-major) for a step of <paramref name="dt"/> seconds; <paramref name="qHorizontal"/> applies
    /// to x and y, <paramref name="qVertical"/> to z (both m²/s³).
    /// </summary>
    public static void ProcessNoise(double dt, double qHorizontal, double qVertical, Span<double> q)
    {
        q[..36].Clear();
        var dt2 = dt * dt;
        var dt3 = dt2 * dt;
        for (var i = 0; i < 3; i++)
        {
            var qi = i < 2 ? qHorizontal : qVertical;
            q[(i * 6) + i] = qi * dt3 / 3.0;
            q[(i * 6) + i + 3] = qi * dt2 / 2.0;
            q[((i + 3) * 6) + i] = qi * dt2 / 2.0;
            q[((i + 3) * 6) + i + 3] = qi * dt;
        }
    }

    /// <summary>
    /// x ← F·x and P ← F·P·Fᵀ + Q in place for a step of <paramref name="dt"/> s, exploiting F = [[I, dt·I], [0, I]]
    /// (3×3 blocks): with P = [[A, B], [Bᵀ, C]], A ← A + dt·(B + Bᵀ) + dt²·C + Q₁₁, B ← B + dt·C + Q₁₂, C ← C + Q₂₂.
    /// O(n²) instead of the dense O(n³); the result is exactly symmetric. Same Q as <see cref="ProcessNoise"/>.
    /// </summary>
    [MethodImpl(MethodImplOptions.AggressiveOptimization)]
    public static void PredictInPlace(Span<double> x, Span<double> p, double dt, double qHorizontal, double qVertical)
    {
        const int n = StateDimension;
        x[0] += dt * x[3];
        x[1] += dt * x[4];
        x[2] += dt * x[5];
        var dt2 = dt * dt;
        var q11h = qHorizontal * dt2 * dt / 3.0;
        var q12h = qHorizontal * dt2 / 2.0;
        var q22h = qHorizontal * dt;
        var q11v = qVertical * dt2 * dt / 3.0;
        var q12v = qVertical * dt2 / 2.0;
        var q22v = qVertical * dt;
        // A from the prior B and C.
        for (var i = 0; i < 3; i++)
        {
            for (var j = i; j < 3; j++)
            {
                var v = p[(i * n) + j] + (dt * (p[(i * n) + j + 3] + p[(j * n) + i + 3])) + (dt2 * p[((i + 3) * n) + j + 3]);
                if (i == j)
                {
                    v += i < 2 ? q11h : q11v;
                }

                p[(i * n) + j] = v;
                p[(j * n) + i] = v;
            }
        }

        // B from the prior B and C; its mirror is the lower-left block.
        for (var i = 0; i < 3; i++)
        {
            for (var j = 0; j < 3; j++)
            {
                var v = p[(i * n) + j + 3] + (dt * p[((i + 3) * n) + j + 3]);
                if (i == j)
                {
                    v += i < 2 ? q12h : q12v;
                }

                p[(i * n) + j + 3] = v;
                p[((j + 3) * n) + i] = v;
            }
        }

        p[(3 * n) + 3] += q22h;
        p[(4 * n) + 4] += q22h;
        p[(5 * n) + 5] += q22v;
    }
}
