namespace Fleet.Server.Validation;

/// <summary>Limits the server holds every request to (configuration section <c>Fleet:Validation</c>).</summary>
public sealed class FleetValidationOptions
{
    public const string SectionName = "Fleet:Validation";

    /// <summary>
    /// A TDOA whose |distance_difference| exceeds the two anchors' baseline (plus their antenna-delay difference) by
    /// more than this (m) is physically impossible and rejected IMPOSSIBLE_VALUE. Default 0.5.
    /// </summary>
    public double DistanceDifferenceMarginMetres { get; set; } = 0.5;

    /// <summary>A sample time further than this ahead of the server's clock is rejected TOO_FAR_IN_FUTURE. Default 10 s.</summary>
    public TimeSpan MaxFutureSkew { get; set; } = TimeSpan.FromSeconds(10);

    /// <summary>
    /// A sample older than an earlier sample of the same robot and kind in the same batch by more than this is
    /// rejected TOO_LATE. Null: the grains' <c>ReorderLagSeconds</c>, else the filter's default (0.1 s).
    /// </summary>
    public TimeSpan? ReorderWindow { get; set; }

    /// <summary>Odometry forward speeds above this magnitude (m/s) are rejected IMPOSSIBLE_VALUE. Default 10.</summary>
    public double MaxForwardSpeed { get; set; } = 10.0;

    /// <summary>Odometry yaw rates above this magnitude (rad/s) are rejected IMPOSSIBLE_VALUE. Default 10.</summary>
    public double MaxYawRate { get; set; } = 10.0;

    /// <summary>Robot entries per ingest batch; more is INVALID_ARGUMENT. Default 1024.</summary>
    public int MaxRobotsPerBatch { get; set; } = 1024;

    /// <summary>Samples (TDOA plus odometry) per ingest batch; more is INVALID_ARGUMENT. Default 20000.</summary>
    public int MaxSamplesPerBatch { get; set; } = 20_000;

    /// <summary>Largest ingest message in bytes; larger ones fail with RESOURCE_EXHAUSTED before parsing. Default 4 MiB.</summary>
    public int MaxIngestMessageBytes { get; set; } = 4 * 1024 * 1024;

    /// <summary>Anchors per anchor map. Default 1024.</summary>
    public int MaxAnchorsPerMap { get; set; } = 1024;

    /// <summary>Robot ids per WatchPoses filter. Default 10000.</summary>
    public int MaxWatchedRobots { get; set; } = 10_000;

    /// <summary>Largest |component| (m) of a robot's tag offset from its reference point. Default 20.</summary>
    public double MaxTagOffsetMetres { get; set; } = 20.0;

    /// <summary>Throws <see cref="InvalidOperationException"/> naming the first unusable setting.</summary>
    public void Validate()
    {
        Require(double.IsFinite(DistanceDifferenceMarginMetres) && DistanceDifferenceMarginMetres >= 0, nameof(DistanceDifferenceMarginMetres), "a finite number ≥ 0");
        Require(MaxFutureSkew >= TimeSpan.Zero, nameof(MaxFutureSkew), "≥ 0");
        Require(ReorderWindow is null || ReorderWindow >= TimeSpan.Zero, nameof(ReorderWindow), "≥ 0");
        Require(double.IsFinite(MaxForwardSpeed) && MaxForwardSpeed > 0, nameof(MaxForwardSpeed), "a finite number > 0");
        Require(double.IsFinite(MaxYawRate) && MaxYawRate > 0, nameof(MaxYawRate), "a finite number > 0");
        Require(MaxRobotsPerBatch > 0, nameof(MaxRobotsPerBatch), "> 0");
        Require(MaxSamplesPerBatch > 0, nameof(MaxSamplesPerBatch), "> 0");
        Require(MaxIngestMessageBytes > 0, nameof(MaxIngestMessageBytes), "> 0");
        Require(MaxAnchorsPerMap > 0, nameof(MaxAnchorsPerMap), "> 0");
        Require(MaxWatchedRobots > 0, nameof(MaxWatchedRobots), "> 0");
        Require(double.IsFinite(MaxTagOffsetMetres) && MaxTagOffsetMetres > 0, nameof(MaxTagOffsetMetres), "a finite number > 0");
    }

    private static void Require(bool ok, string name, string rule)
    {
        if (!ok)
        {
            throw new InvalidOperationException($"{SectionName}:{name} must be {rule}");
        }
    }
}
