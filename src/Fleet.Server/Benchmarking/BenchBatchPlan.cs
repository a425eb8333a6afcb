using System.Globalization;
using Fleet.Contracts.V1;
using Fleet.Estimation.Measurements;
using Fleet.Server.Clients;
using Fleet.Simulation;

namespace Fleet.Server.Benchmarking;

/// <summary>A batch and its send time relative to the start of its phase (simulated seconds).</summary>
public readonly record struct TimedBatch(MeasurementBatch Batch, double Offset);

/// <summary>
/// Turns a simulated fleet into gateway batches for the benchmarks: robot k replays trajectory k mod the simulated
/// count under its own id, batches cover <c>batchSeconds</c> of <c>robotsPerBatch</c> robots, and each robot always
/// travels on the same stream, so its samples stay in order. Windows of simulated time are sliced on demand, so a long
/// run never holds all its protobuf batches at once.
/// </summary>
public sealed class BenchBatchPlan
{
    private readonly List<ObservationRecord>[] _perTrajectory;
    private readonly string _siteId;
    private readonly int _robots;
    private readonly double _batchSeconds;
    private readonly int _robotsPerBatch;
    private readonly int _streams;
    private readonly double _start;
    private ulong _nextBatchId;

    public BenchBatchPlan(MeasurementGenerator generator, string siteId, int robots, double batchSeconds, int robotsPerBatch, int streams, string robotPrefix = "bench-")
    {
        ArgumentOutOfRangeException.ThrowIfLessThan(robots, 1);
        ArgumentOutOfRangeException.ThrowIfLessThan(robotsPerBatch, 1);
        ArgumentOutOfRangeException.ThrowIfLessThan(streams, 1);
        ArgumentOutOfRangeException.ThrowIfNegativeOrZero(batchSeconds);
        (_siteId, _robots, _batchSeconds, _robotsPerBatch, _streams) = (siteId, robots, batchSeconds, robotsPerBatch, streams);
        var records = generator.Generate().ToList();
        var trajectories = generator.Robots.Count;
        RobotIds = Enumerable.Range(0, robots).Select(k => robotPrefix + k.ToString("0000", CultureInfo.InvariantCulture)).ToArray();
        Robots = Enumerable.Range(0, robots).Select(k => generator.Robots[k % trajectories] with { Robot = RobotIds[k] }).ToList();

        var byTrajectory = new Dictionary<string, int>(StringComparer.Ordinal);
        _perTrajectory = new List<ObservationRecord>[trajectories];
        for (var i = 0; i < trajectories; i++)
        {
            _perTrajectory[i] = [];
        }

        foreach (var record in records)
        {
            if (record is RobotRecord robot)
            {
                byTrajectory[robot.Robot] = byTrajectory.Count;
            }
            else if (record is TdoaRecord or OdometryRecord)
            {
                _perTrajectory[byTrajectory[record.Robot]].Add(record);
            }
        }

        _start = records.OfType<TdoaRecord>().Select(r => r.Time).DefaultIfEmpty(0).Min();
    }

    /// <summary>The registered robots (simulated tag offset and motion model under each replica's id).</summary>
    public IReadOnlyList<RobotRecord> Robots { get; }

    public IReadOnlyList<string> RobotIds { get; }

    /// <summary>
    /// Batches of simulated time [<paramref name="from"/>, <paramref name="to"/>) (seconds after the first sample), one
    /// list per stream. Offsets are relative to <paramref name="from"/>: a batch leaves when its slice has passed, and the
    /// robot groups' send times are spread over the slice (gateways are not synchronised).
    /// </summary>
    public List<TimedBatch>[] Build(double from, double to)
    {
        var streams = Enumerable.Range(0, _streams).Select(_ => new List<TimedBatch>()).ToArray();
        var groups = (_robots + _robotsPerBatch - 1) / _robotsPerBatch;
        var slices = (int)Math.Ceiling(((to - from) / _batchSeconds) - 1e-9);
        var cursor = new int[_perTrajectory.Length];
        for (var t = 0; t < cursor.Length; t++)
        {
            var list = _perTrajectory[t];
            while (cursor[t] < list.Count && Time(list[cursor[t]]) < _start + from)
            {
                cursor[t]++;
            }
        }

        for (var slice = 0; slice < slices; slice++)
        {
            var sliceStart = slice * _batchSeconds;
            var end = _start + from + Math.Min(sliceStart + _batchSeconds, to - from);
            var sliceRecords = new List<ObservationRecord>[_perTrajectory.Length];
            for (var t = 0; t < sliceRecords.Length; t++)
            {
                sliceRecords[t] = [];
                var list = _perTrajectory[t];
                while (cursor[t] < list.Count && Time(list[cursor[t]]) < end)
                {
                    sliceRecords[t].Add(list[cursor[t]++]);
                }
            }

            for (var g = 0; g < groups; g++)
            {
                var batch = new MeasurementBatch { SiteId = _siteId, BatchId = _nextBatchId++ };
                for (var k = g * _robotsPerBatch; k < Math.Min(_robots, (g + 1) * _robotsPerBatch); k++)
                {
                    batch.Robots.Add(Samples(RobotIds[k], sliceRecords[k % sliceRecords.Length]));
                }

                var offset = sliceStart + (_batchSeconds * (1 + ((double)g / groups)));
                streams[g % _streams].Add(new TimedBatch(batch, offset));
            }
        }

        return streams;
    }

    /// <summary>Samples (TDOA and odometry) in every batch of the streams.</summary>
    public static long SampleCount(List<TimedBatch>[] streams) => streams.Sum(stream => stream.Sum(b => SampleCount(b.Batch)));

    public static long SampleCount(MeasurementBatch batch) => batch.Robots.Sum(r => (long)r.Tdoa.Count + r.Odometry.Count);

    private static RobotSamples Samples(string robotId, List<ObservationRecord> records)
    {
        var samples = new RobotSamples { RobotId = robotId };
        foreach (var record in records)
        {
            if (record is TdoaRecord tdoa)
            {
                samples.Tdoa.Add(new TdoaSample
                {
                    SampleTime = MeasurementBatcher.ToTimestamp(tdoa.Time),
                    AnchorA = tdoa.AnchorA,
                    AnchorB = tdoa.AnchorB,
                    DistanceDifference = tdoa.DistanceDifference,
                });
            }
            else if (record is OdometryRecord odometry)
            {
                samples.Odometry.Add(new OdometrySample
                {
                    SampleTime = MeasurementBatcher.ToTimestamp(odometry.Time),
                    ForwardSpeed = odometry.ForwardSpeed,
                    YawRate = odometry.YawRate,
                });
            }
        }

        return samples;
    }

    private static double Time(ObservationRecord record) => record switch
    {
        TdoaRecord t => t.Time,
        OdometryRecord o => o.Time,
        _ => 0,
    };
}
