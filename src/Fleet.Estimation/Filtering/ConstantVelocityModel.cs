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
}
