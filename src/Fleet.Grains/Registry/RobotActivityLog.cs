using System.Collections.Concurrent;
using Microsoft.Extensions.Options;

namespace Fleet.Grains.Registry;

/// <summary>
/// Collects "robot seen" marks from robot grains and writes them to the registry in one transaction per flush, so no
/// grain turn waits on the database and a thousand robots deactivating at once cost one write. The host flushes it on a
/// timer; disposing flushes what is left. (Last poses go through <see cref="RobotPoseLog"/>.)
/// </summary>
public sealed class RobotActivityLog(ISiteRegistry registry, IOptions<FleetGrainOptions> options, TimeProvider time) : IDisposable
{
    private readonly ConcurrentDictionary<(string SiteId, string RobotId), DateTimeOffset> _pending = new();
    private readonly Lock _flushGate = new();

    public int PendingCount => _pending.Count;

    public void Mark(string siteId, string robotId) => _pending[(siteId, robotId)] = time.GetUtcNow();

    /// <summary>Writes every pending mark; returns how many.</summary>
    public int Flush()
    {
        lock (_flushGate)
        {
            var batch = new List<RobotSighting>(_pending.Count);
            foreach (var key in _pending.Keys)
            {
                if (_pending.TryRemove(key, out var seen))
                {
                    batch.Add(new RobotSighting(key.SiteId, key.RobotId, seen));
                }
            }

            registry.TouchRobots(batch, options.Value.DefaultMotion);

            return batch.Count;
        }
    }

    public void Dispose() => Flush();
}
