using Fleet.Grains.Registry;
using Microsoft.Extensions.Logging;
using Microsoft.Extensions.Options;

namespace Fleet.Grains;

/// <summary>
/// One per site: caches the site's active anchor-map and bias-model versions from the registry and pushes every
/// change to the robots whose filters are loaded, so a new version takes effect without a restart. Robots
/// re-attach on a heartbeat, which also rebuilds the robot set after this grain was unloaded. A fresh activation (e.g.
/// on a surviving silo after a silo loss) starts from the robots the registry saw within two heartbeats, so fleet
/// snapshots cover the whole site at once rather than after the next heartbeat.
/// </summary>
public sealed partial class SiteGrain(ISiteRegistry registry, ILogger<SiteGrain> logger, IOptions<FleetGrainOptions>? options = null, TimeProvider? time = null) : Grain, ISiteGrain
{
    private readonly HashSet<string> _robots = new(StringComparer.Ordinal);
    private SiteConfig _config = new(string.Empty, false, 0, 0);

    public override Task OnActivateAsync(CancellationToken cancellationToken)
    {
        _config = Load();
        if (_config.Exists)
        {
            SeedRecentRobots();
        }

        return Task.CompletedTask;
    }

    private void SeedRecentRobots()
    {
        var heartbeat = (options?.Value ?? new FleetGrainOptions()).RobotHeartbeat;
        var since = (time ?? TimeProvider.System).GetUtcNow() - (2 * heartbeat);
        string? after = null;
        while (true)
        {
            var page = registry.ListRobots(_config.SiteId, after, 1000);
            foreach (var robot in page)
            {
                if (robot.LastSeen >= since)
                {
                    _robots.Add(robot.RobotId);
                }
            }

            if (page.Count < 1000)
            {
                return;
            }

            after = page[^1].RobotId;
        }
    }

    public Task<SiteConfig> AttachRobot(string robotId)
    {
        _robots.Add(robotId);
        return Task.FromResult(_config);
    }

    public Task DetachRobot(string robotId)
    {
        _robots.Remove(robotId);
        return Task.CompletedTask;
    }

    public Task<SiteConfig> Refresh()
    {
        var config = Load();
        if (config != _config)
        {
            _config = config;
            LogPushing(logger, config.SiteId, config.AnchorMapVersion, config.BiasModelVersion, _robots.Count);
            foreach (var robot in _robots)
            {
                // One-way: a robot that misses it catches up at its next heartbeat.
                _ = GrainFactory.GetGrain<IRobotGrain>(GrainKeys.Robot(config.SiteId, robot)).ApplySiteConfig(config);
            }
        }

        return Task.FromResult(_config);
    }

    public Task<string[]> GetAttachedRobots()
    {
        var robots = _robots.ToArray();
        Array.Sort(robots, StringComparer.Ordinal);
        return Task.FromResult(robots);
    }

    private SiteConfig Load()
    {
        var siteId = this.GetPrimaryKeyString();
        var site = registry.GetSite(siteId);
        return site is null
            ? new SiteConfig(siteId, false, 0, 0)
            : new SiteConfig(siteId, true, site.AnchorMapVersion, site.BiasModelVersion);
    }

    [LoggerMessage(1, LogLevel.Information, "Site {SiteId}: anchor map v{MapVersion}, bias model v{ModelVersion} pushed to {RobotCount} robots")]
    private static partial void LogPushing(ILogger logger, string siteId, int mapVersion, int modelVersion, int robotCount);
}
