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
}
