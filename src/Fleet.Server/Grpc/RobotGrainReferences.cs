using System.Collections.Concurrent;
using Fleet.Grains;

namespace Fleet.Server.Grpc;

/// <summary>
/// Grain references of the robots this host has ingest for, by site and robot id. Resolving a reference formats the
/// grain key and looks up the interface type on every call; ingest asks for the same robots several times a second.
/// The table is dropped whole when it grows past <see cref="MaxEntries"/>, so a flood of made-up robot ids cannot grow it
/// without bound (references are cheap to resolve again).
/// </summary>
internal sealed class RobotGrainReferences(IGrainFactory grains)
{
    public const int MaxEntries = 100_000;

    private ConcurrentDictionary<string, ConcurrentDictionary<string, IRobotGrain>> _sites = new(StringComparer.Ordinal);
    private int _count;

    public IRobotGrain Get(string siteId, string robotId)
    {
        var sites = _sites;
        if (sites.TryGetValue(siteId, out var robots) && robots.TryGetValue(robotId, out var grain))
        {
            return grain;
        }

        grain = grains.GetGrain<IRobotGrain>(GrainKeys.Robot(siteId, robotId));
        if (Interlocked.Increment(ref _count) > MaxEntries)
        {
            _sites = new(StringComparer.Ordinal);
            Interlocked.Exchange(ref _count, 0);
            return grain;
        }

        robots ??= sites.GetOrAdd(siteId, _ => new ConcurrentDictionary<string, IRobotGrain>(StringComparer.Ordinal));
        robots[robotId] = grain;
        return grain;
    }
}
