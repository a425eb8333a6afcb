using Fleet.Estimation.Filtering;

namespace Fleet.Grains;

/// <summary>Settings of the robot and site grains (configuration section <c>Fleet:Grains</c>).</summary>
public sealed class FleetGrainOptions
{
    public const string SectionName = "Fleet:Grains";

    /// <summary>A robot's filter is unloaded after this long without calls.</summary>
    public TimeSpan RobotIdleTimeout { get; set; } = TimeSpan.FromMinutes(10);

    /// <summary>How often a loaded robot re-registers with its site grain and records when it was last seen.</summary>
    public TimeSpan RobotHeartbeat { get; set; } = TimeSpan.FromSeconds(30);

    /// <summary>Motion model of robots the registry has no settings for.</summary>
    public MotionModelKind DefaultMotion { get; set; } = MotionModelKind.PlanarOdometry;

    /// <summary>
    /// Constant-velocity tags ride ground robots too, so their height is held at the tag offset's height above the
    /// floor (weak vertical anchor spread cannot then drag the horizontal estimate). Planar robots always hold it.
    /// Turn off for sites where tags change height (lift masts, handhelds).
    /// </summary>
    public bool HoldTagHeight { get; set; } = true;

    /// <summary>Robust kernel of every filter; null keeps the estimation core's default.</summary>
    public RobustKernel? Kernel { get; set; }

    /// <summary>TDOA noise (1σ, metres); null keeps the estimation core's default.</summary>
    public double? TdoaSigmaMetres { get; set; }

    /// <summary>How late a sample may arrive and still be used (s); null keeps the estimation core's default.</summary>
    public double? ReorderLagSeconds { get; set; }

    /// <summary>A reactivated robot resumes from its stored last pose only if it was saved at most this long ago.</summary>
    public TimeSpan LastPoseMaxAge { get; set; } = TimeSpan.FromMinutes(2);

    /// <summary>
    /// Speed bound (m/s) by which a restored pose's uncertainty grows per second since it was saved; 2 m/s covers
    /// warehouse ground robots (common practice: AMRs and tuggers drive at most about 2 m/s).
    /// </summary>
    public double LastPoseSpeedBound { get; set; } = 2.0;

    /// <summary>How often robots' last-seen marks and pose checkpoints are written to the registry (one transaction each time).</summary>
    public TimeSpan RegistryFlushInterval { get; set; } = TimeSpan.FromSeconds(5);

    /// <summary>
    /// A robot pushes its outcome counts and anchor tallies to the shared instruments and the anchor-health tracker at
    /// most this often (and on heartbeats and deactivation); both take locks shared by the site's robots.
    /// </summary>
    public TimeSpan TelemetryInterval { get; set; } = TimeSpan.FromSeconds(1);
}
