using System.Buffers;
using Fleet.Contracts.V1;
using Fleet.Data;
using Fleet.Estimation.Measurements;
using Google.Protobuf;

namespace Fleet.Server.Recording;

/// <summary>
/// Reads <see cref="IngestRecorder"/> files (<c>.fleetrec</c>: varint length, then a <see cref="MeasurementBatch"/>,
/// repeated). A server killed mid-write leaves a torn last record: a length prefix cut short, or fewer bytes than the
/// prefix announces. Such a tail — and any record that does not parse or has no site id (zeros left by a power cut
/// read as empty records) — ends the read with one warning naming the file and the byte offset of the record; every
/// complete record before it is returned. Nothing after a damaged record is trusted, because record boundaries past
/// it are unknown.
/// </summary>
public static class RecordingReader
{
    /// <summary>Records larger than this are treated as damage (the server's receive limit is far lower).</summary>
    public const int MaxRecordBytes = 256 * 1024 * 1024;

    public static IEnumerable<MeasurementBatch> ReadBatches(string path, Action<DataDiagnostic> onDiagnostic)
    {
        using var stream = new FileStream(path, FileMode.Open, FileAccess.Read, FileShare.ReadWrite, 1 << 16, FileOptions.SequentialScan);
        foreach (var batch in ReadBatches(stream, path, onDiagnostic))
        {
            yield return batch;
        }
    }

    /// <summary>As <see cref="ReadBatches(string, Action{DataDiagnostic})"/> for a stream named <paramref name="source"/> in messages.</summary>
    public static IEnumerable<MeasurementBatch> ReadBatches(Stream stream, string source, Action<DataDiagnostic> onDiagnostic)
    {
        long offset = 0;
        var buffer = ArrayPool<byte>.Shared.Rent(1 << 16);
        try
        {
            while (true)
            {
                var start = offset;
                var (length, prefixBytes, status) = ReadLength(stream);
                if (status == LengthStatus.EndOfFile)
                {
                    yield break;
                }

                offset += prefixBytes;
                if (status == LengthStatus.Truncated)
                {
                    Warn(onDiagnostic, source, start, $"torn record (length prefix cut short after {prefixBytes} bytes); the tail is skipped");
                    yield break;
                }

                if (status == LengthStatus.Invalid || length > MaxRecordBytes)
                {
                    Warn(onDiagnostic, source, start, "damaged record (impossible length); the rest of the file is skipped");
                    yield break;
                }

                if (buffer.Length < length)
                {
                    ArrayPool<byte>.Shared.Return(buffer);
                    buffer = ArrayPool<byte>.Shared.Rent((int)length);
                }

                var read = stream.ReadAtLeast(buffer.AsSpan(0, (int)length), (int)length, throwOnEndOfStream: false);
                offset += read;
                if (read < length)
                {
                    Warn(onDiagnostic, source, start, $"torn record ({read} of {length} bytes present); the tail is skipped");
                    yield break;
                }

                MeasurementBatch? batch;
                try
                {
                    batch = MeasurementBatch.Parser.ParseFrom(buffer, 0, (int)length);
                }
                catch (InvalidProtocolBufferException)
                {
                    batch = null;
                }

                if (batch is null || batch.SiteId.Length == 0)
                {
                    Warn(onDiagnostic, source, start, "damaged record (not a measurement batch); the rest of the file is skipped");
                    yield break;
                }

                yield return batch;
            }
        }
        finally
        {
            ArrayPool<byte>.Shared.Return(buffer);
        }
    }

    /// <summary>
    /// The TDOA and odometry samples of a recording as measurement-log records, in recorded order (within one
    /// robot's share of a batch merged by time), for the offline commands.
    /// </summary>
    public static IEnumerable<ObservationRecord> ReadRecords(string path, Action<DataDiagnostic> onDiagnostic)
    {
        foreach (var batch in ReadBatches(path, onDiagnostic))
        {
            foreach (var robot in batch.Robots)
            {
                int i = 0, j = 0;
                while (i < robot.Tdoa.Count || j < robot.Odometry.Count)
                {
                    if (j < robot.Odometry.Count && (i >= robot.Tdoa.Count || Seconds(robot.Odometry[j].SampleTime) <= Seconds(robot.Tdoa[i].SampleTime)))
                    {
                        var o = robot.Odometry[j++];
                        yield return new OdometryRecord(Seconds(o.SampleTime), robot.RobotId, o.ForwardSpeed, o.YawRate);
                    }
                    else
                    {
                        var t = robot.Tdoa[i++];
                        yield return new TdoaRecord(Seconds(t.SampleTime), robot.RobotId, t.AnchorA, t.AnchorB, t.DistanceDifference);
                    }
                }
            }
        }
    }

    private static double Seconds(Google.Protobuf.WellKnownTypes.Timestamp? t) => t is null ? double.NaN : t.Seconds + (t.Nanos * 1e-9);

    private static void Warn(Action<DataDiagnostic> onDiagnostic, string source, long offset, string message) =>
        onDiagnostic(new DataDiagnostic(source, 0, DiagnosticSeverity.Warning, $"byte {offset}: {message}"));

    private enum LengthStatus
    {
        Ok,
        EndOfFile,
        Truncated,
        Invalid,
    }

    /// <summary>A protobuf base-128 varint (at most 10 bytes, protobuf.dev/programming-guides/encoding).</summary>
    private static (long Length, int Bytes, LengthStatus Status) ReadLength(Stream stream)
    {
        ulong value = 0;
        for (var i = 0; i < 10; i++)
        {
            var b = stream.ReadByte();
            if (b < 0)
            {
                return (0, i, i == 0 ? LengthStatus.EndOfFile : LengthStatus.Truncated);
            }

            value |= (ulong)(b & 0x7F) << (7 * i);
            if ((b & 0x80) == 0)
            {
                return value > int.MaxValue ? (0, i + 1, LengthStatus.Invalid) : ((long)value, i + 1, LengthStatus.Ok);
            }
        }

        return (0, 10, LengthStatus.Invalid);
    }
}
