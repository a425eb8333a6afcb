using Fleet.Contracts.V1;
using Fleet.Estimation.Anchors;
using Fleet.Estimation.Filtering;
using Fleet.Grains;
using Fleet.Server.Grpc;
using Google.Protobuf.WellKnownTypes;
using AnchorMap = Fleet.Estimation.Anchors.AnchorMap;
using SampleKind = Fleet.Grains.SampleKind;

namespace Fleet.Server.Validation;

/// <summary>
/// Ingest validation in two stages. <see cref="ValidateStructure"/> refuses a malformed or oversize batch as a whole
/// (INVALID_ARGUMENT with field violations). <see cref="Screen"/> then checks every sample on its own and sets aside
/// the bad ones with a reason, so the rest of the batch is still applied: missing or invalid times, non-finite
/// numbers, times too far ahead of the server clock or too far behind the robot's earlier samples, unknown anchors,
/// a == b, |ddiff| beyond the anchors' baseline plus a margin, implausible odometry, and bad or repeated robot ids.
/// </summary>
public sealed class IngestBatchValidator(FleetValidationOptions options, double reorderWindowSeconds, TimeProvider time)
{
    /// <summary>The reorder window screening uses (s).</summary>
    public double ReorderWindowSeconds { get; } = reorderWindowSeconds;

    /// <summary>Throws INVALID_ARGUMENT (field paths under <paramref name="field"/>) when the batch as a whole is unusable.</summary>
    public void ValidateStructure(MeasurementBatch? batch, string field)
    {
        if (batch is null)
        {
            GrpcErrors.ThrowInvalidArgument(field, "is required");
        }

        var violations = new Violations();
        violations.SiteId($"{field}.site_id", batch.SiteId);
        if (batch.ReceiveTime is { } receive && !TimestampRules.IsValid(receive))
        {
            violations.Add($"{field}.receive_time", TimestampRules.InvalidDescription);
        }

        if (batch.Robots.Count > options.MaxRobotsPerBatch)
        {
            violations.Add($"{field}.robots", $"has {batch.Robots.Count} entries; at most {options.MaxRobotsPerBatch} per batch");
        }

        long samples = 0;
        foreach (var robot in batch.Robots)
        {
            samples += robot.Tdoa.Count + robot.Odometry.Count;
        }

        if (samples > options.MaxSamplesPerBatch)
        {
            violations.Add($"{field}.robots", $"hold {samples} samples; at most {options.MaxSamplesPerBatch} per batch");
        }

        violations.ThrowIfAny();
    }

    /// <summary>
    /// Checks every sample of a structurally valid batch. <paramref name="map"/> is the site's active anchor map
    /// (null: no map yet, anchors are not checked here and the robot grains reject the samples NO_ANCHOR_MAP).
    /// </summary>
    public ScreenedRobot[] Screen(MeasurementBatch batch, AnchorMap? map, long receivedTimestamp) =>
        Screen(batch, new ActiveAnchorMap(map, 0), receivedTimestamp);

    /// <summary>
    /// As <see cref="Screen(MeasurementBatch, AnchorMap?, long)"/>; with a map version, the passed samples carry their
    /// anchor indices in that version so the robot grain does not look the ids up again.
    /// </summary>
    public ScreenedRobot[] Screen(MeasurementBatch batch, ActiveAnchorMap active, long receivedTimestamp)
    {
        var map = active.Map;
        var latestAllowed = (time.GetUtcNow().ToUnixTimeMilliseconds() / 1000.0) + options.MaxFutureSkew.TotalSeconds;
        var seen = new HashSet<string>(batch.Robots.Count, StringComparer.Ordinal);
        var result = new ScreenedRobot[batch.Robots.Count];
        for (var k = 0; k < batch.Robots.Count; k++)
        {
            var samples = batch.Robots[k];
            var robotOk = FleetIds.IsValidId(samples.RobotId) && seen.Add(samples.RobotId);
            result[k] = robotOk
                ? ScreenRobot(samples, map, active.Version, latestAllowed, receivedTimestamp)
                : ScreenedRobot.RejectAll(samples, SampleRejectionReason.InvalidRobot, receivedTimestamp);
        }

        return result;
    }

    private ScreenedRobot ScreenRobot(RobotSamples samples, AnchorMap? map, int mapVersion, double latestAllowed, long receivedTimestamp)
    {
        // Built for the common case of a clean batch: the arrays are sized for every sample and trimmed only when
        // something was set aside, and index lists and the rejection list exist only then.
        List<SampleRejectionEntry>? rejections = null;
        var tdoaTotal = samples.Tdoa.Count;
        var times = new double[tdoaTotal];
        var a = new string[tdoaTotal];
        var b = new string[tdoaTotal];
        var values = new double[tdoaTotal];
        var withIndices = map is not null && mapVersion > 0;
        var indexA = withIndices ? new int[tdoaTotal] : [];
        var indexB = withIndices ? new int[tdoaTotal] : [];
        int[]? tdoaKeep = null;
        var n = 0;
        var newest = double.NegativeInfinity;
        for (var i = 0; i < tdoaTotal; i++)
        {
            var s = samples.Tdoa[i];
            var reason = CheckTdoa(s, map, latestAllowed, ref newest, out var ia, out var ib);
            if (reason != SampleRejectionReason.None)
            {
                (rejections ??= []).Add(new SampleRejectionEntry(SampleKind.Tdoa, i, reason));
                tdoaKeep ??= Enumerable.Range(0, tdoaTotal).ToArray();
                continue;
            }

            if (tdoaKeep is not null)
            {
                tdoaKeep[n] = i;
            }

            times[n] = ProtoTime.ToSeconds(s.SampleTime);
            a[n] = s.AnchorA;
            b[n] = s.AnchorB;
            values[n] = s.DistanceDifference;
            if (withIndices)
            {
                indexA[n] = ia;
                indexB[n] = ib;
            }

            n++;
        }

        var odometryTotal = samples.Odometry.Count;
        var odometryTimes = new double[odometryTotal];
        var speeds = new double[odometryTotal];
        var yawRates = new double[odometryTotal];
        int[]? odometryKeep = null;
        var m = 0;
        newest = double.NegativeInfinity;
        for (var j = 0; j < odometryTotal; j++)
        {
            var s = samples.Odometry[j];
            var reason = CheckOdometry(s, latestAllowed, ref newest);
            if (reason != SampleRejectionReason.None)
            {
                (rejections ??= []).Add(new SampleRejectionEntry(SampleKind.Odometry, j, reason));
                odometryKeep ??= Enumerable.Range(0, odometryTotal).ToArray();
                continue;
            }

            if (odometryKeep is not null)
            {
                odometryKeep[m] = j;
            }

            odometryTimes[m] = ProtoTime.ToSeconds(s.SampleTime);
            speeds[m] = s.ForwardSpeed;
            yawRates[m] = s.YawRate;
            m++;
        }

        return new ScreenedRobot
        {
            RobotId = samples.RobotId,
            Batch = new RobotBatch
            {
                TdoaTimes = Trim(times, n),
                AnchorA = Trim(a, n),
                AnchorB = Trim(b, n),
                DistanceDifferences = Trim(values, n),
                AnchorMapVersion = withIndices ? mapVersion : 0,
                AnchorIndexA = withIndices ? Trim(indexA, n) : [],
                AnchorIndexB = withIndices ? Trim(indexB, n) : [],
                OdometryTimes = Trim(odometryTimes, m),
                ForwardSpeeds = Trim(speeds, m),
                YawRates = Trim(yawRates, m),
                ReceivedTimestamp = receivedTimestamp,
            },
            TdoaIndices = tdoaKeep is null ? null : Trim(tdoaKeep, n),
            OdometryIndices = odometryKeep is null ? null : Trim(odometryKeep, m),
            Rejections = rejections is null ? [] : rejections,
        };
    }

    private static T[] Trim<T>(T[] array, int length) => length == array.Length ? array : array[..length];

    private SampleRejectionReason CheckTdoa(TdoaSample s, AnchorMap? map, double latestAllowed, ref double newest, out int a, out int b)
    {
        (a, b) = (-1, -1);
        var timeReason = CheckTime(s.SampleTime, latestAllowed, ref newest);
        if (timeReason != SampleRejectionReason.None)
        {
            return timeReason;
        }

        if (!double.IsFinite(s.DistanceDifference))
        {
            return SampleRejectionReason.InvalidValue;
        }

        if (string.Equals(s.AnchorA, s.AnchorB, StringComparison.Ordinal))
        {
            return SampleRejectionReason.SameAnchor;
        }

        if (map is null)
        {
            return SampleRejectionReason.None;
        }

        if (!map.TryGetIndex(s.AnchorA, out a) || !map.TryGetIndex(s.AnchorB, out b))
        {
            return SampleRejectionReason.UnknownAnchor;
        }

        // Triangle inequality: | |p − b| − |p − a| | ≤ |a − b| for any tag position p (plus the delay difference).
        return Math.Abs(s.DistanceDifference) > TdoaMeasurementModel.MaximumMagnitude(map[a], map[b]) + options.DistanceDifferenceMarginMetres
            ? SampleRejectionReason.ImpossibleValue
            : SampleRejectionReason.None;
    }

    private SampleRejectionReason CheckOdometry(OdometrySample s, double latestAllowed, ref double newest)
    {
        var timeReason = CheckTime(s.SampleTime, latestAllowed, ref newest);
        if (timeReason != SampleRejectionReason.None)
        {
            return timeReason;
        }

        if (!double.IsFinite(s.ForwardSpeed) || !double.IsFinite(s.YawRate))
        {
            return SampleRejectionReason.InvalidValue;
        }

        return Math.Abs(s.ForwardSpeed) > options.MaxForwardSpeed || Math.Abs(s.YawRate) > options.MaxYawRate
            ? SampleRejectionReason.ImpossibleValue
            : SampleRejectionReason.None;
    }

    private SampleRejectionReason CheckTime(Timestamp? t, double latestAllowed, ref double newest)
    {
        if (t is null || !TimestampRules.IsValid(t))
        {
            return SampleRejectionReason.InvalidValue;
        }

        var seconds = ProtoTime.ToSeconds(t);
        if (seconds > latestAllowed)
        {
            return SampleRejectionReason.TooFarInFuture;
        }

        if (seconds < newest - ReorderWindowSeconds)
        {
            return SampleRejectionReason.TooLate;
        }

        newest = Math.Max(newest, seconds);
        return SampleRejectionReason.None;
    }
}

/// <summary>
/// One robot's share of a batch after screening: the samples that passed (as the grain takes them), the original index
/// of each (null when every sample of that kind passed) and the rejections with original indices.
/// </summary>
public sealed class ScreenedRobot
{
    public required string RobotId { get; init; }

    public required RobotBatch Batch { get; init; }

    public int[]? TdoaIndices { get; init; }

    public int[]? OdometryIndices { get; init; }

    public required IReadOnlyList<SampleRejectionEntry> Rejections { get; init; }

    /// <summary>True when no sample is left for the grain.</summary>
    public bool IsEmpty => Batch.Count == 0;

    /// <summary>Original index of a sample the grain reported by its index in <see cref="Batch"/>.</summary>
    public int OriginalIndex(SampleKind kind, int index) => kind == SampleKind.Tdoa
        ? TdoaIndices is null ? index : TdoaIndices[index]
        : OdometryIndices is null ? index : OdometryIndices[index];

    /// <summary>Every sample of the robot rejected for one reason; nothing goes to a grain.</summary>
    public static ScreenedRobot RejectAll(RobotSamples samples, SampleRejectionReason reason, long receivedTimestamp)
    {
        var rejections = new List<SampleRejectionEntry>(samples.Tdoa.Count + samples.Odometry.Count);
        for (var i = 0; i < samples.Tdoa.Count; i++)
        {
            rejections.Add(new SampleRejectionEntry(SampleKind.Tdoa, i, reason));
        }

        for (var j = 0; j < samples.Odometry.Count; j++)
        {
            rejections.Add(new SampleRejectionEntry(SampleKind.Odometry, j, reason));
        }

        return new ScreenedRobot
        {
            RobotId = samples.RobotId,
            Batch = new RobotBatch { ReceivedTimestamp = receivedTimestamp },
            TdoaIndices = [],
            OdometryIndices = [],
            Rejections = rejections,
        };
    }
}

/// <summary>Validity of a google.protobuf.Timestamp as its definition states it.</summary>
public static class TimestampRules
{
    // google/protobuf/timestamp.proto: seconds within 0001-01-01T00:00:00Z … 9999-12-31T23:59:59Z, nanos in [0, 999999999].
    public const long MinSeconds = -62_135_596_800;
    public const long MaxSeconds = 253_402_300_799;
    public const string InvalidDescription = "must be a valid Timestamp (seconds within years 1–9999, nanos in 0…999999999)";

    public static bool IsValid(Timestamp t) => t.Seconds is >= MinSeconds and <= MaxSeconds && t.Nanos is >= 0 and <= 999_999_999;
}
