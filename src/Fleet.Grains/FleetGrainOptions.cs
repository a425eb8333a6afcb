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

    /// <summary>Robust kernel of every filter; null keeps the estimation core's default.</summary>
    public RobustKernel? Kernel { get; set; }

    /// <summary>TDOA noise (1σ, metres); null keeps the estimation core's default.</summary>
    public double? TdoaSigmaMetres { get; set; }

    /// <summary>How late a sample may arrive and still be used (s); null keeps the estimation core's default.</summary>
    public double? ReorderLagSeconds { get; set; }

    /// <summary>How often robots' last-seen marks and pose checkpoints are written to the registry (one transaction each time).</summary>
    public TimeSpan RegistryFlushInterval { get; set; } = TimeSpan.FromSeconds(5);

    /// <summary>
    /// A restarted robot resumes from its stored pose when that pose is at most this old (wall clock and site clock);
    /// older poses are ignored and the robot re-acquires from scratch.
    /// </summary>
    public TimeSpan ResumeMaxAge { get; set; } = TimeSpan.FromSeconds(60);

    /// <summary>
    /// Speed (m/s) the resumed position sigma grows with for every second between the stored pose and the first new
    /// sample, so a robot that kept driving while the server was down is still inside the gate.
    /// </summary>
    public double ResumeSpeedMetresPerSecond { get; set; } = 1.5;

    /// <summary>
    /// A robot pushes its outcome counts and anchor tallies to the shared instruments and the anchor-health tracker at
    /// most this often (and on heartbeats and deactivation); both take locks shared by the site's robots.
    /// </summary>
    public TimeSpan TelemetryInterval { get; set; } = TimeSpan.FromSeconds(1);
}
