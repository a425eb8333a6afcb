using Fleet.Contracts.V1;
using Fleet.Estimation.Measurements;
using Google.Protobuf.WellKnownTypes;

namespace Fleet.Server.Clients;

/// <summary>
/// Client-side helper: gathers TDOA and odometry records (any robots, time order) into
/// <see cref="MeasurementBatch"/> messages, one <see cref="RobotSamples"/> per robot. Other record kinds are ignored.
/// Record times (s) become Timestamps of the same seconds since the Unix epoch.
/// </summary>
public sealed class MeasurementBatcher(string siteId)
{
    private readonly Dictionary<string, RobotSamples> _robots = new(StringComparer.Ordinal);
    private MeasurementBatch _batch = new() { SiteId = siteId };

    /// <summary>Samples held for the next batch.</summary>
    public int Count { get; private set; }

    /// <summary>Adds a TDOA or odometry record; returns false for other kinds.</summary>
    public bool Add(ObservationRecord record)
    {
        switch (record)
        {
            case TdoaRecord t:
                Robot(t.Robot).Tdoa.Add(new TdoaSample
                {
                    SampleTime = ToTimestamp(t.Time),
                    AnchorA = t.AnchorA,
                    AnchorB = t.AnchorB,
                    DistanceDifference = t.DistanceDifference,
                });
                break;
            case OdometryRecord o:
                Robot(o.Robot).Odometry.Add(new OdometrySample { SampleTime = ToTimestamp(o.Time), ForwardSpeed = o.ForwardSpeed, YawRate = o.YawRate });
                break;
            default:
                return false;
        }

        Count++;
        return true;
    }

    /// <summary>Returns the gathered batch and starts a new one.</summary>
    public MeasurementBatch TakeBatch(ulong batchId)
    {
        var batch = _batch;
        batch.BatchId = batchId;
        _batch = new MeasurementBatch { SiteId = batch.SiteId };
        _robots.Clear();
        Count = 0;
        return batch;
    }

    public static Timestamp ToTimestamp(double seconds)
    {
        var whole = Math.Floor(seconds);
        var nanos = (int)Math.Round((seconds - whole) * 1e9);
        if (nanos >= 1_000_000_000)
        {
            whole += 1;
            nanos -= 1_000_000_000;
        }

        return new Timestamp { Seconds = (long)whole, Nanos = nanos };
    }

    private RobotSamples Robot(string robotId)
    {
        if (!_robots.TryGetValue(robotId, out var samples))
        {
            samples = new RobotSamples { RobotId = robotId };
            _robots.Add(robotId, samples);
            _batch.Robots.Add(samples);
        }

        return samples;
    }
}
