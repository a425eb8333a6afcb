namespace Fleet.Estimation.Filtering;

/// <summary>
/// Planar odometry-driven process model for a ground robot. State (x, y, z, yaw) of the robot reference point in
/// the site frame (m, rad). Inputs: forward speed v (m/s) and yaw rate w (rad/s), held constant over the step
/// (zero-order hold). The unicycle step uses the mid-interval heading:
/// x′ = x + v·dt·cos(yaw + w·dt/2), y′ = y + v·dt·sin(yaw + w·dt/2), z′ = z, yaw′ = yaw + w·dt.
/// </summary>
public static class PlanarOdometryModel
{
    public const int StateDimension = 4;

    /// <summary>Noise densities for one step. Along/lateral/vertical in m²/s, yaw rate in rad²/s.</summary>
    public readonly record struct NoiseDensities(double AlongTrack, double Lateral, double YawRate, double Vertical);

    /// <summary>One unicycle step; <paramref name="next"/> may alias <paramref name="state"/>. Yaw is wrapped to (−π, π].</summary>
    public static void Step(ReadOnlySpan<double> state, double v, double w, double dt, Span<double> next)
    {
        var mid = state[3] + (0.5 * w * dt);
        var x = state[0] + (v * dt * Math.Cos(mid));
        var y = state[1] + (v * dt * Math.Sin(mid));
        var z = state[2];
        var yaw = WrapAngle(state[3] + (w * dt));
        next[0] = x;
        next[1] = y;
        next[2] = z;
        next[3] = yaw;
    }

    /// <summary>Jacobian ∂Step/∂state (4×4 row-major).</summary>
    public static void Transition(ReadOnlySpan<double> state, double v, double w, double dt, Span<double> f)
    {
        f[..16].Clear();
        f[0] = 1;
        f[5] = 1;
        f[10] = 1;
        f[15] = 1;
        var mid = state[3] + (0.5 * w * dt);
        f[3] = -v * dt * Math.Sin(mid);
        f[7] = v * dt * Math.Cos(mid);
    }

    /// <summary>
    /// Process noise Q (4×4 row-major) for a step of <paramref name="dt"/> s. Velocity errors along and across the
    /// heading integrate to position as white noise (variance density × dt); yaw-rate noise integrates to yaw
    /// (c·dt) and, through the heading, to lateral position (c·v²·dt³/3, cross term c·v·dt²/2), the same structure
    /// as a continuous white-noise-acceleration model.
    /// </summary>
    public static void ProcessNoise(double yaw, double v, double w, double dt, in NoiseDensities noise, Span<double> q)
    {
        q[..16].Clear();
        var mid = yaw + (0.5 * w * dt);
        double c = Math.Cos(mid), s = Math.Sin(mid);
        var along = noise.AlongTrack * dt;
        var lateral = (noise.Lateral * dt) + (noise.YawRate * v * v * dt * dt * dt / 3.0);
        var crossYaw = noise.YawRate * v * dt * dt / 2.0;

        // along-track direction u = (c, s), lateral n = (−s, c)
        q[0] = (along * c * c) + (lateral * s * s);
        q[1] = (along * c * s) - (lateral * c * s);
        q[4] = q[1];
        q[5] = (along * s * s) + (lateral * c * c);
        q[10] = noise.Vertical * dt;
        q[15] = noise.YawRate * dt;
        q[3] = -s * crossYaw;
        q[12] = q[3];
        q[7] = c * crossYaw;
        q[13] = q[7];
    }

    /// <summary>Wraps an angle to (−π, π]; non-finite input is returned unchanged.</summary>
    public static double WrapAngle(double angle)
    {
        if (angle > -Math.PI && angle <= Math.PI)
        {
            return angle;
        }

        if (!double.IsFinite(angle))
        {
            return angle;
        }

        var wrapped = Math.IEEERemainder(angle, 2.0 * Math.PI);
        return wrapped <= -Math.PI ? wrapped + (2.0 * Math.PI) : wrapped;
    }
}
