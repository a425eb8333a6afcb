namespace Fleet.Estimation.Filtering;

/// <summary>
/// Cumulative outcome counts of one <see cref="RobotFilter"/> since construction (not cleared by
/// <see cref="RobotFilter.Reset"/>). Events re-applied during an out-of-order rollback are counted once, when they
/// first arrive. Not thread-safe, like the filter.
/// </summary>
public sealed class FilterCounters
{
    private readonly long[] _rejected = new long[Enum.GetValues<RejectionReason>().Length];

    /// <summary>TDOAs applied at full weight.</summary>
    public long Accepted { get; private set; }

    /// <summary>TDOAs applied with a weight in (0, 0.99).</summary>
    public long DownWeighted { get; private set; }

    /// <summary>TDOAs held for initialisation.</summary>
    public long Buffered { get; private set; }

    /// <summary>Odometry samples applied.</summary>
    public long OdometryApplied { get; private set; }

    /// <summary>Valid inputs the motion model does not use (odometry for a constant-velocity filter).</summary>
    public long Ignored { get; private set; }

    /// <summary>Events (TDOA or odometry) that arrived out of order and were applied by rollback and replay.</summary>
    public long ReorderedApplied { get; private set; }

    /// <summary>Successful fixes (first acquisition and every re-acquisition).</summary>
    public long Initialisations { get; private set; }

    /// <summary>Losses of track that forced a re-acquisition (divergence, time gap).</summary>
    public long Reinitialisations { get; private set; }

    /// <summary>All rejected events, any reason.</summary>
    public long Rejected { get; private set; }

    /// <summary>Rejected events for one reason.</summary>
    public long RejectedFor(RejectionReason reason)
    {
        var i = (int)reason;
        return i >= 0 && i < _rejected.Length ? _rejected[i] : 0;
    }

    internal void Count(in UpdateResult result)
    {
        switch (result.Outcome)
        {
            case UpdateOutcome.Accepted:
                Accepted++;
                break;
            case UpdateOutcome.DownWeighted:
                DownWeighted++;
                break;
            case UpdateOutcome.Buffered:
                Buffered++;
                break;
            case UpdateOutcome.Ignored:
                Ignored++;
                break;
            case UpdateOutcome.Rejected:
                Rejected++;
                var i = (int)result.Reason;
                if (i >= 0 && i < _rejected.Length)
                {
                    _rejected[i]++;
                }

                break;
        }
    }

    internal void CountOdometry() => OdometryApplied++;

    internal void CountReordered() => ReorderedApplied++;

    internal void CountInitialisation() => Initialisations++;

    internal void CountReinitialisation() => Reinitialisations++;
}
