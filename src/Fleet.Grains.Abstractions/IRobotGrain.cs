using Orleans.Concurrency;

namespace Fleet.Grains;

/// <summary>
/// One robot's filter. Keyed by <see cref="GrainKeys.Robot"/> ("site/robot"). Activated by its first batch,
/// deactivated when idle. Every call carries a batch: never call it once per sample.
/// </summary>
public interface IRobotGrain : IGrainWithStringKey
{
    /// <summary>Runs every sample of the batch through the filter in time order and publishes the resulting pose.</summary>
    Task<RobotBatchResult> Ingest(RobotBatch batch);

    /// <summary>The latest estimate, or null when the robot has no track yet.</summary>
    Task<PoseSnapshot?> GetLatestPose();

    /// <summary>The estimate predicted to <paramref name="time"/> (site clock, s), or null without a track.</summary>
    Task<PoseSnapshot?> PredictPose(double time);

    /// <summary>Switches to the site's anchor map and bias model versions in <paramref name="config"/>.</summary>
    [OneWay]
    Task ApplySiteConfig(SiteConfig config);

    /// <summary>Reloads the robot's settings (tag offset, motion model) and restarts its filter.</summary>
    Task ReloadSettings();
}

/// <summary>
/// The active configuration of one site. Robots fetch it on activation and the site grain pushes every change.
/// Versions are 0 when the site has no anchor map or no active bias model.
/// </summary>
public interface ISiteGrain : IGrainWithStringKey
{
    /// <summary>Registers an active robot and returns the site's current configuration.</summary>
    Task<SiteConfig> AttachRobot(string robotId);

    [OneWay]
    Task DetachRobot(string robotId);

    /// <summary>Reloads the active versions from the registry and pushes them to every attached robot.</summary>
    Task<SiteConfig> Refresh();

    /// <summary>Robots whose filter is loaded now, sorted by id.</summary>
    Task<string[]> GetAttachedRobots();
}

/// <summary>How grain keys are formed.</summary>
public static class GrainKeys
{
    public const char Separator = '/';

    public static string Robot(string siteId, string robotId) => siteId + Separator + robotId;

    /// <summary>Splits a robot key; site ids never contain the separator, robot ids may.</summary>
    public static (string SiteId, string RobotId) ParseRobot(string key)
    {
        var i = key.IndexOf(Separator, StringComparison.Ordinal);
        return i <= 0 ? throw new ArgumentException($"'{key}' is not a robot grain key", nameof(key)) : (key[..i], key[(i + 1)..]);
    }
}
