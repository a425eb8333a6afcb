namespace Fleet.Grains;

/// <summary>A vector in the site frame (metres or m/s).</summary>
[GenerateSerializer, Immutable]
public readonly record struct Vec3([property: Id(0)] double X, [property: Id(1)] double Y, [property: Id(2)] double Z);

/// <summary>Active versions of a site; 0 means none. <see cref="Exists"/> is false for an unknown site.</summary>
[GenerateSerializer, Immutable]
public sealed record SiteConfig(
    [property: Id(0)] string SiteId,
    [property: Id(1)] bool Exists,
    [property: Id(2)] int AnchorMapVersion,
    [property: Id(3)] int BiasModelVersion);

/// <summary>
/// One robot's samples from one ingest batch, as parallel arrays (cheap to build and to copy).
/// TDOA: times (s, site clock), anchor ids and ddiff = |p − b| − |p − a| (m). Odometry: times, forward speed (m/s),
/// yaw rate (rad/s). <see cref="ReceivedTimestamp"/> is the <see cref="System.Diagnostics.Stopwatch"/> timestamp at
/// which the server received the batch, for the ingest-to-publish latency. When screening already resolved the anchor
/// ids, <see cref="AnchorIndexA"/>/<see cref="AnchorIndexB"/> hold their indices in anchor-map version
/// <see cref="AnchorMapVersion"/>, so a grain running that version skips the lookups (otherwise they are empty and 0).
/// </summary>
[GenerateSerializer, Immutable]
public sealed class RobotBatch
{
    [Id(0)] public double[] TdoaTimes { get; init; } = [];
    [Id(1)] public string[] AnchorA { get; init; } = [];
    [Id(2)] public string[] AnchorB { get; init; } = [];
    [Id(3)] public double[] DistanceDifferences { get; init; } = [];
    [Id(4)] public double[] OdometryTimes { get; init; } = [];
    [Id(5)] public double[] ForwardSpeeds { get; init; } = [];
    [Id(6)] public double[] YawRates { get; init; } = [];
    [Id(7)] public long ReceivedTimestamp { get; init; }
    [Id(8)] public int AnchorMapVersion { get; init; }
    [Id(9)] public int[] AnchorIndexA { get; init; } = [];
    [Id(10)] public int[] AnchorIndexB { get; init; } = [];

    public int Count => TdoaTimes.Length + OdometryTimes.Length;
}

/// <summary>Our own names for why a sample was not used (mirrors fleet.v1.RejectionReason).</summary>
public enum SampleRejectionReason : byte
{
    None = 0,
    InvalidValue = 1,
    UnknownSite = 2,
    NoAnchorMap = 3,
    UnknownAnchor = 4,
    SameAnchor = 5,
    TooLate = 6,
    TooFarInFuture = 7,
    ImpossibleValue = 8,
    OutlierGate = 9,
    ZeroWeight = 10,
    NotInitialised = 11,
    InvalidRobot = 12,
    Duplicate = 13,
}

/// <summary>Kind of a sample in a <see cref="RobotBatch"/>.</summary>
public enum SampleKind : byte
{
    Tdoa = 1,
    Odometry = 2,
}

/// <summary>One rejected sample: its kind, its index in the batch's arrays of that kind, and why.</summary>
[GenerateSerializer, Immutable]
public readonly record struct SampleRejectionEntry(
    [property: Id(0)] SampleKind Kind,
    [property: Id(1)] int Index,
    [property: Id(2)] SampleRejectionReason Reason);

/// <summary>What a robot grain did with a batch. <see cref="RejectedByReason"/> is indexed by <see cref="SampleRejectionReason"/>.</summary>
[GenerateSerializer, Immutable]
public sealed class RobotBatchResult
{
    public const int ReasonCount = 14;

    /// <summary>At most this many rejections are itemised per robot batch.</summary>
    public const int MaxItemisedRejections = 64;

    /// <summary>All-zero counts, shared by every result without rejections (a copy per batch would be garbage).</summary>
    public static readonly int[] NoRejections = new int[ReasonCount];

    [Id(0)] public int Accepted { get; init; }
    [Id(1)] public int DownWeighted { get; init; }
    [Id(2)] public int Buffered { get; init; }
    [Id(3)] public int Rejected { get; init; }
    /// <summary>Counts by reason; shared (never written) when nothing was rejected.</summary>
    [Id(4)] public int[] RejectedByReason { get; init; } = NoRejections;
    [Id(5)] public SampleRejectionEntry[] Rejections { get; init; } = [];
    [Id(6)] public bool RejectionsTruncated { get; init; }

    /// <summary>Every sample of <paramref name="batch"/> rejected for one reason (e.g. unknown site).</summary>
    public static RobotBatchResult RejectAll(RobotBatch batch, SampleRejectionReason reason)
    {
        var counts = new int[ReasonCount];
        counts[(int)reason] = batch.Count;
        var n = Math.Min(batch.Count, MaxItemisedRejections);
        var items = new SampleRejectionEntry[n];
        for (var i = 0; i < n; i++)
        {
            items[i] = i < batch.TdoaTimes.Length
                ? new SampleRejectionEntry(SampleKind.Tdoa, i, reason)
                : new SampleRejectionEntry(SampleKind.Odometry, i - batch.TdoaTimes.Length, reason);
        }

        return new RobotBatchResult { Rejected = batch.Count, RejectedByReason = counts, Rejections = items, RejectionsTruncated = n < batch.Count };
    }
}

/// <summary>Our own names for a track's health (mirrors the estimation core's states).</summary>
public enum RobotTrackState : byte
{
    Unknown = 0,
    Acquiring = 1,
    Locked = 2,
    Uncertain = 3,
    Lost = 4,
}

/// <summary>
/// A published pose: reference point and tag position (site frame, m), yaw (rad), velocity (m/s), 7×7 row-major
/// covariance over (x, y, z, yaw, vx, vy, vz), time of validity (s, site clock).
/// </summary>
[GenerateSerializer, Immutable]
public sealed class PoseSnapshot
{
    [Id(0)] public required string SiteId { get; init; }
    [Id(1)] public required string RobotId { get; init; }
    [Id(2)] public double Time { get; init; }
    [Id(3)] public Vec3 Position { get; init; }
    [Id(4)] public Vec3 TagPosition { get; init; }
    [Id(5)] public double Yaw { get; init; }
    [Id(6)] public Vec3 Velocity { get; init; }
    [Id(7)] public required double[] Covariance { get; init; }
    [Id(8)] public RobotTrackState State { get; init; }
    [Id(9)] public double RecentRejectionRatio { get; init; }
}
