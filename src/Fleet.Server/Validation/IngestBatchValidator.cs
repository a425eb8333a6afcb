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
    public ScreenedRobot[] Screen(MeasurementBatch batch, AnchorMap? map, long receivedTimestamp)
    {
        var latestAllowed = (time.GetUtcNow().ToUnixTimeMilliseconds() / 1000.0) + options.MaxFutureSkew.TotalSeconds;
        var seen = new HashSet<string>(StringComparer.Ordinal);
        var result = new ScreenedRobot[batch.Robots.Count];
        for (var k = 0; k < batch.Robots.Count; k++)
        {
            var samples = batch.Robots[k];
            var robotOk = FleetIds.IsValidId(samples.RobotId) && seen.Add(samples.RobotId);
            result[k] = robotOk
                ? ScreenRobot(samples, map, latestAllowed, receivedTimestamp)
                : ScreenedRobot.RejectAll(samples, SampleRejectionReason.InvalidRobot, receivedTimestamp);
        }

        return result;
    }

    private ScreenedRobot ScreenRobot(RobotSamples samples, AnchorMap? map, double latestAllowed, long receivedTimestamp)
    {
        var rejections = new List<SampleRejectionEntry>();

        var tdoaKeep = new List<int>(samples.Tdoa.Count);
        var newest = double.NegativeInfinity;
        for (var i = 0; i < samples.Tdoa.Count; i++)
        {
            var reason = CheckTdoa(samples.Tdoa[i], map, latestAllowed, ref newest);
            if (reason == SampleRejectionReason.None)
            {
                tdoaKeep.Add(i);
            }
            else
            {
                rejections.Add(new SampleRejectionEntry(SampleKind.Tdoa, i, reason));
            }
        }

        var odometryKeep = new List<int>(samples.Odometry.Count);
        newest = double.NegativeInfinity;
        for (var j = 0; j < samples.Odometry.Count; j++)
        {
            var reason = CheckOdometry(samples.Odometry[j], latestAllowed, ref newest);
            if (reason == SampleRejectionReason.None)
            {
                odometryKeep.Add(j);
            }
            else
            {
                rejections.Add(new SampleRejectionEntry(SampleKind.Odometry, j, reason));
            }
        }

        var n = tdoaKeep.Count;
        var times = new double[n];
        var a = new string[n];
        var b = new string[n];
        var values = new double[n];
        for (var i = 0; i < n; i++)
        {
            var s = samples.Tdoa[tdoaKeep[i]];
            times[i] = ProtoTime.ToSeconds(s.SampleTime);
            a[i] = s.AnchorA;
            b[i] = s.AnchorB;
            values[i] = s.DistanceDifference;
        }

        var m = odometryKeep.Count;
        var odometryTimes = new double[m];
        var speeds = new double[m];
        var yawRates = new double[m];
        for (var j = 0; j < m; j++)
        {
            var s = samples.Odometry[odometryKeep[j]];
            odometryTimes[j] = ProtoTime.ToSeconds(s.SampleTime);
            speeds[j] = s.ForwardSpeed;
            yawRates[j] = s.YawRate;
        }

        return new ScreenedRobot
        {
            RobotId = samples.RobotId,
            Batch = new RobotBatch
            {
                TdoaTimes = times,
                AnchorA = a,
                AnchorB = b,
                DistanceDifferences = values,
                OdometryTimes = odometryTimes,
                ForwardSpeeds = speeds,
                YawRates = yawRates,
                ReceivedTimestamp = receivedTimestamp,
            },
            TdoaIndices = n == samples.Tdoa.Count ? null : [.. tdoaKeep],
            OdometryIndices = m == samples.Odometry.Count ? null : [.. odometryKeep],
            Rejections = rejections,
        };
    }

    private SampleRejectionReason CheckTdoa(TdoaSample s, AnchorMap? map, double latestAllowed, ref double newest)
    {
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

        if (!map.TryGetIndex(s.AnchorA, out var a) || !map.TryGetIndex(s.AnchorB, out var b))
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

    public required List<SampleRejectionEntry> Rejections { get; init; }

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
