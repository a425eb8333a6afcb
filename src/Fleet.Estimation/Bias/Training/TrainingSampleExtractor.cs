using Fleet.Estimation.Anchors;
using Fleet.Estimation.Geometry;
using Fleet.Estimation.Measurements;

namespace Fleet.Estimation.Bias.Training;

/// <summary>What <see cref="TrainingSampleExtractor.Extract"/> produced and what it skipped (counts of TDOA records).</summary>
public sealed record SampleExtraction(
    IReadOnlyList<TdoaTrainingSample> Samples,
    int TdoaRecords,
    int SkippedUnknownAnchor,
    int SkippedNoTruth,
    int SkippedTruthGap,
    int SkippedNonFinite);

/// <summary>Pairs TDOA records with ground truth to build <see cref="TdoaTrainingSample"/>s.</summary>
public static class TrainingSampleExtractor
{
    /// <summary>Default largest gap (s) between the two truth records bracketing a TDOA.</summary>
    public const double DefaultMaxTruthGapSeconds = 0.2;

    /// <summary>
    /// Modelled ddiff (m) for a tag at <paramref name="tagPosition"/>: (|p − b| + δb) − (|p − a| + δa), where δ is each
    /// anchor's <see cref="Anchor.AntennaDelayMetres"/> (extra path length added by the anchor's hardware).
    /// </summary>
    public static double ModelledDistanceDifference(AnchorMap map, int anchorA, int anchorB, in Vector3D tagPosition)
    {
        var a = map[anchorA];
        var b = map[anchorB];
        return (Vector3D.Distance(tagPosition, b.Position) + b.AntennaDelayMetres)
            - (Vector3D.Distance(tagPosition, a.Position) + a.AntennaDelayMetres);
    }

    /// <summary>
    /// Pairs every TDOA record of <paramref name="records"/> with the same robot's truth linearly interpolated to the
    /// TDOA time (yaw along the shorter arc). A TDOA is skipped when an anchor id is not in the layout, when no truth
    /// brackets its time, when the bracketing truths are more than <paramref name="maxTruthGapSeconds"/> apart, or when
    /// a value is non-finite. Records need not be sorted. Odometry and robot records are ignored.
    /// </summary>
    /// <param name="layout">Site layout the anchor ids refer to.</param>
    /// <param name="records">Observation records including truth lines.</param>
    /// <param name="group">Group key for validation; defaults to the layout's site id.</param>
    /// <param name="maxTruthGapSeconds">Largest gap between bracketing truth records (s).</param>
    public static SampleExtraction Extract(SiteLayout layout, IEnumerable<ObservationRecord> records, string? group = null,
        double maxTruthGapSeconds = DefaultMaxTruthGapSeconds)
    {
        ArgumentNullException.ThrowIfNull(layout);
        ArgumentNullException.ThrowIfNull(records);
        var map = layout.Anchors;
        var key = group ?? layout.SiteId;
        var truthByRobot = new Dictionary<string, List<TruthRecord>>(StringComparer.Ordinal);
        var tdoas = new List<TdoaRecord>();
        foreach (var record in records)
        {
            switch (record)
            {
                case TdoaRecord tdoa:
                    tdoas.Add(tdoa);
                    break;
                case TruthRecord truth:
                    if (!truthByRobot.TryGetValue(truth.Robot, out var list))
                    {
                        list = [];
                        truthByRobot.Add(truth.Robot, list);
                    }

                    list.Add(truth);
                    break;
            }
        }

        var truthTimes = new Dictionary<string, (double[] Times, TruthRecord[] Truths)>(StringComparer.Ordinal);
        foreach (var (robot, list) in truthByRobot)
        {
            var truths = list.Where(t => double.IsFinite(t.Time) && t.TagPosition.IsFinite && double.IsFinite(t.Yaw))
                .OrderBy(t => t.Time).ToArray();
            truthTimes.Add(robot, (truths.Select(t => t.Time).ToArray(), truths));
        }

        var samples = new List<TdoaTrainingSample>(tdoas.Count);
        int unknownAnchor = 0, noTruth = 0, gap = 0, nonFinite = 0;
        foreach (var tdoa in tdoas)
        {
            if (!double.IsFinite(tdoa.Time) || !double.IsFinite(tdoa.DistanceDifference))
            {
                nonFinite++;
                continue;
            }

            if (!map.TryGetIndex(tdoa.AnchorA, out var a) || !map.TryGetIndex(tdoa.AnchorB, out var b) || a == b)
            {
                unknownAnchor++;
                continue;
            }

            if (!truthTimes.TryGetValue(tdoa.Robot, out var truth) || truth.Times.Length == 0)
            {
                noTruth++;
                continue;
            }

            var index = Array.BinarySearch(truth.Times, tdoa.Time);
            TruthRecord before, after;
            if (index >= 0)
            {
                before = after = truth.Truths[index];
            }
            else
            {
                var next = ~index;
                if (next == 0 || next == truth.Times.Length)
                {
                    noTruth++;
                    continue;
                }

                before = truth.Truths[next - 1];
                after = truth.Truths[next];
            }

            var span = after.Time - before.Time;
            if (span > maxTruthGapSeconds)
            {
                gap++;
                continue;
            }

            var w = span > 0 ? (tdoa.Time - before.Time) / span : 0.0;
            var position = before.TagPosition + (w * (after.TagPosition - before.TagPosition));
            var yaw = before.Yaw + (w * WrapAngle(after.Yaw - before.Yaw));
            var trueDdiff = ModelledDistanceDifference(map, a, b, position);
            samples.Add(new TdoaTrainingSample(key, tdoa.Robot, tdoa.Time, map, a, b, position, WrapAngle(yaw),
                tdoa.DistanceDifference, trueDdiff));
        }

        return new SampleExtraction(samples, tdoas.Count, unknownAnchor, noTruth, gap, nonFinite);
    }

    /// <summary>Wraps an angle (rad) into (−π, π].</summary>
    internal static double WrapAngle(double angle)
    {
        var wrapped = Math.IEEERemainder(angle, 2 * Math.PI);
        return wrapped <= -Math.PI ? wrapped + (2 * Math.PI) : wrapped;
    }
}
