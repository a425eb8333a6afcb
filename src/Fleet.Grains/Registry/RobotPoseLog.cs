using System.Collections.Concurrent;

namespace Fleet.Grains.Registry;

/// <summary>
/// A robot's last pose as kept for reactivation: reference point (planar) and tag position (site frame, m), yaw
/// (rad), 1σ horizontal-position and yaw uncertainty, time of validity (s, site clock) and the wall-clock time it was saved.
/// </summary>
public sealed record StoredRobotPose(
    string SiteId,
    string RobotId,
    double Time,
    Vec3 Position,
    Vec3 TagPosition,
    double Yaw,
    double PositionSigma,
    double YawSigma,
    DateTimeOffset SavedAt);

/// <summary>
/// Durable last poses, so a robot whose grain comes back (on another silo after a silo loss, or after a restart)
/// resumes from where it was instead of re-acquiring from scratch. Implemented beside <see cref="ISiteRegistry"/>.
/// </summary>
public interface IRobotPoseStore
{
    /// <summary>Upserts every pose in one transaction.</summary>
    void SavePoses(IReadOnlyCollection<StoredRobotPose> poses);

    StoredRobotPose? GetPose(string siteId, string robotId);
}

/// <summary>
/// Collects each robot's latest pose from its grain and writes them in one transaction per flush (the host flushes it
/// about once a second), so ingest never waits on the database.
/// </summary>
public sealed class RobotPoseLog(IRobotPoseStore store, TimeProvider time)
{
    private readonly ConcurrentDictionary<(string SiteId, string RobotId), PoseSnapshot> _pending = new();
    private readonly Lock _flushGate = new();

    public void Mark(PoseSnapshot pose) => _pending[(pose.SiteId, pose.RobotId)] = pose;

    /// <summary>Writes every pending pose; returns how many.</summary>
    public int Flush()
    {
        lock (_flushGate)
        {
            var now = time.GetUtcNow();
            var batch = new List<StoredRobotPose>(_pending.Count);
            foreach (var key in _pending.Keys)
            {
                if (_pending.TryRemove(key, out var pose))
                {
                    batch.Add(ToStored(pose, now));
                }
            }

            if (batch.Count > 0)
            {
                store.SavePoses(batch);
            }

            return batch.Count;
        }
    }

    /// <summary>Horizontal 1σ from the larger of the x and y variances; yaw 1σ from the yaw variance (covariance order x, y, z, yaw, …).</summary>
    public static StoredRobotPose ToStored(PoseSnapshot pose, DateTimeOffset savedAt)
    {
        var c = pose.Covariance;
        var positionVariance = c.Length >= 49 ? Math.Max(c[0], c[8]) : double.NaN;
        var yawVariance = c.Length >= 49 ? c[24] : double.NaN;
        return new StoredRobotPose(pose.SiteId, pose.RobotId, pose.Time, pose.Position, pose.TagPosition, pose.Yaw,
            Math.Sqrt(positionVariance), Math.Sqrt(yawVariance), savedAt);
    }
}
