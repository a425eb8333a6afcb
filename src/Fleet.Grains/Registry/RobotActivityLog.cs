using System.Collections.Concurrent;
using Microsoft.Extensions.Options;

namespace Fleet.Grains.Registry;

/// <summary>
/// Collects "robot seen" marks from robot grains and writes them to the registry in one transaction per flush, so no
/// grain turn waits on the database and a thousand robots deactivating at once cost one write. Robots' latest pose
/// checkpoints ride along the same way (only the newest per robot is kept until the flush). The host flushes it
/// on a timer; disposing flushes what is left.
/// </summary>
public sealed class RobotActivityLog(ISiteRegistry registry, IOptions<FleetGrainOptions> options, TimeProvider time) : IDisposable
{
    private readonly ConcurrentDictionary<(string SiteId, string RobotId), DateTimeOffset> _pending = new();
    private readonly ConcurrentDictionary<(string SiteId, string RobotId), RobotPoseCheckpoint> _poses = new();
    private readonly Lock _flushGate = new();

    public int PendingCount => _pending.Count;

    public int PendingPoseCount => _poses.Count;

    public void Mark(string siteId, string robotId) => _pending[(siteId, robotId)] = time.GetUtcNow();

    /// <summary>Holds a robot's latest pose for the next flush (replacing any older one not yet written).</summary>
    public void RecordPose(RobotPoseCheckpoint checkpoint) => _poses[(checkpoint.SiteId, checkpoint.RobotId)] = checkpoint;

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

            // Sightings first: a pose row needs no robot row, but an operator listing robots should see both.
            var poses = new List<RobotPoseCheckpoint>(_poses.Count);
            foreach (var key in _poses.Keys)
            {
                if (_poses.TryRemove(key, out var pose))
                {
                    poses.Add(pose);
                }
            }

            registry.SaveRobotPoses(poses);
            return batch.Count;
        }
    }

    public void Dispose() => Flush();
}
