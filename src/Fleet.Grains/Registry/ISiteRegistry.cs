using Fleet.Estimation.Anchors;
using Fleet.Estimation.Filtering;
using Fleet.Estimation.Geometry;

namespace Fleet.Grains.Registry;

/// <summary>A site and its active versions (0: none).</summary>
public sealed record SiteEntry(string SiteId, string DisplayName, DateTimeOffset CreatedAt, int AnchorMapVersion, int BiasModelVersion);

/// <summary>One stored anchor-map version.</summary>
public sealed record AnchorMapEntry(string SiteId, int Version, DateTimeOffset CreatedAt, IReadOnlyList<Anchor> Anchors);

/// <summary>One stored bias-model version (without its bytes).</summary>
public sealed record BiasModelEntry(string SiteId, int Version, DateTimeOffset CreatedAt, string Description, long SizeBytes, string Sha256, bool Active);

/// <summary>What the registry keeps about a robot: tag lever arm (body frame, m), motion model, wall-clock first and last seen.</summary>
public sealed record RobotEntry(string SiteId, string RobotId, Vector3D TagOffset, MotionModelKind Motion, DateTimeOffset FirstSeen, DateTimeOffset LastSeen);

/// <summary>
/// A robot's last estimate, kept so a restarted server can resume tracking: reference point (site frame, m), yaw
/// (rad), velocity (m/s), 7×7 row-major covariance over (x, y, z, yaw, vx, vy, vz) at <see cref="Time"/> (s, site
/// clock), and the wall-clock time it was taken.
/// </summary>
public sealed record RobotPoseCheckpoint(
    string SiteId, string RobotId, double Time, Vector3D Position, double Yaw, Vector3D Velocity, double[] Covariance, DateTimeOffset SavedAt);

/// <summary>A robot seen at a wall-clock time.</summary>
public readonly record struct RobotSighting(string SiteId, string RobotId, DateTimeOffset Seen);

public enum RegistryError
{
    NotFound,
    AlreadyExists,
    FailedPrecondition,
}

/// <summary>A registry operation that cannot be done; <see cref="Error"/> says why.</summary>
public sealed class RegistryException(RegistryError error, string message) : Exception(message)
{
    public RegistryError Error { get; } = error;
}

/// <summary>
/// Durable store of sites, anchor-map versions, bias-model versions and robot metadata. The source of truth:
/// grains cache what it holds and reload on change. Implementations are thread-safe. Listing takes an exclusive
/// "after" key and a limit (keyset paging).
/// </summary>
public interface ISiteRegistry
{
    /// <exception cref="RegistryException">AlreadyExists.</exception>
    SiteEntry CreateSite(string siteId, string displayName);

    SiteEntry? GetSite(string siteId);

    IReadOnlyList<SiteEntry> ListSites(string? afterSiteId, int limit);

    /// <summary>Stores a new version (previous + 1) and makes it active.</summary>
    /// <exception cref="RegistryException">NotFound (site).</exception>
    AnchorMapEntry AddAnchorMap(string siteId, IReadOnlyList<Anchor> anchors);

    /// <summary>The given version, or the active one for version 0; null when there is none.</summary>
    AnchorMapEntry? GetAnchorMap(string siteId, int version);

    /// <exception cref="RegistryException">NotFound (site).</exception>
    BiasModelEntry AddBiasModel(string siteId, byte[] model, string description, bool activate);

    byte[]? GetBiasModelBytes(string siteId, int version);

    IReadOnlyList<BiasModelEntry> ListBiasModels(string siteId, int afterVersion, int limit);

    /// <summary>Makes <paramref name="version"/> active (0: no bias correction) and records it for roll-back.</summary>
    /// <exception cref="RegistryException">NotFound (site or version).</exception>
    SiteEntry ActivateBiasModel(string siteId, int version);

    /// <summary>Undoes the last activation: the version active before it becomes active again (0 if none was).</summary>
    /// <exception cref="RegistryException">NotFound (site); FailedPrecondition (nothing to roll back).</exception>
    SiteEntry RollBackBiasModel(string siteId);

    RobotEntry? GetRobot(string siteId, string robotId);

    /// <exception cref="RegistryException">NotFound (site).</exception>
    RobotEntry PutRobot(string siteId, string robotId, Vector3D tagOffset, MotionModelKind motion);

    /// <summary>
    /// Records when robots were last seen (one transaction), creating unknown ones with <paramref name="defaultMotion"/>
    /// and no lever arm. Robots of sites that do not exist are skipped.
    /// </summary>
    void TouchRobots(IReadOnlyCollection<RobotSighting> sightings, MotionModelKind defaultMotion);

    IReadOnlyList<RobotEntry> ListRobots(string siteId, string? afterRobotId, int limit);

    /// <summary>Stores robots' latest pose checkpoints in one transaction (newer replaces older; unknown sites skipped).</summary>
    void SaveRobotPoses(IReadOnlyCollection<RobotPoseCheckpoint> checkpoints);

    /// <summary>The robot's last stored pose checkpoint, or null.</summary>
    RobotPoseCheckpoint? GetRobotPose(string siteId, string robotId);
}
