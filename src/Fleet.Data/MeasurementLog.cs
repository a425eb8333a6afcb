using System.Buffers;
using System.Text;
using System.Text.Json;
using Fleet.Estimation.Filtering;
using Fleet.Estimation.Geometry;
using Fleet.Estimation.Measurements;

namespace Fleet.Data;

/// <summary>
/// JSON Lines measurement logs (DESIGN.md "Measurement log"), one record per line:
/// <code>
/// {"type":"robot","robot":"tug-07","tag_offset":[0.1,0,0.45],"motion":"planar"}
/// {"type":"tdoa","t":12.34,"robot":"tug-07","a":"HP-A01","b":"HP-A02","ddiff":0.8123}
/// {"type":"odom","t":12.345,"robot":"tug-07","v":1.2,"w":0.05}
/// {"type":"truth","t":12.35,"robot":"tug-07","p":[10.1,4.2,0.45],"yaw":1.571}
/// </code>
/// <c>motion</c> is optional: <c>"planar"</c> (default) or <c>"cv"</c> (constant-velocity 3-D, TDOA only).
/// Units: seconds, metres, m/s, rad, rad/s. Numbers are invariant culture; the writer uses the shortest
/// round-trip form, so a written log reads back bit for bit. Unknown fields are ignored.
/// </summary>
public static class MeasurementLog
{
    /// <summary>
    /// Streams the records of the log at <paramref name="path"/> in file order (constant memory). Malformed lines
    /// are reported to <paramref name="onDiagnostic"/> as errors with their line number and skipped; records of an
    /// unknown <c>type</c> are reported as warnings and skipped; blank lines are ignored. Nothing is dropped silently.
    /// </summary>
    public static IEnumerable<ObservationRecord> Read(string path, Action<DataDiagnostic> onDiagnostic)
    {
        ArgumentNullException.ThrowIfNull(onDiagnostic);
        using var stream = new FileStream(path, FileMode.Open, FileAccess.Read, FileShare.Read, 1 << 16, FileOptions.SequentialScan);
        foreach (var record in Read(stream, path, onDiagnostic))
        {
            yield return record;
        }
    }

    /// <summary>As <see cref="Read(string, Action{DataDiagnostic})"/> for a UTF-8 stream named <paramref name="source"/> in messages. The stream is left open.</summary>
    public static IEnumerable<ObservationRecord> Read(Stream stream, string source, Action<DataDiagnostic> onDiagnostic)
    {
        ArgumentNullException.ThrowIfNull(stream);
        ArgumentNullException.ThrowIfNull(onDiagnostic);
        using var reader = new StreamReader(stream, Encoding.UTF8, detectEncodingFromByteOrderMarks: true, bufferSize: 1 << 16, leaveOpen: true);
        var buffer = new byte[1024];
        long lineNumber = 0;
        string? line;
        while ((line = reader.ReadLine()) is not null)
        {
            lineNumber++;
            if (string.IsNullOrWhiteSpace(line))
            {
                continue;
            }

            var needed = Encoding.UTF8.GetMaxByteCount(line.Length);
            if (needed > buffer.Length)
            {
                buffer = new byte[Math.Max(needed, buffer.Length * 2)];
            }

            var length = Encoding.UTF8.GetBytes(line, buffer);
            var record = ParseLine(buffer.AsSpan(0, length), out var severity, out var message);
            if (record is not null)
            {
                yield return record;
            }
            else
            {
                onDiagnostic(new DataDiagnostic(source, lineNumber, severity, message!));
            }
        }
    }

    /// <summary>Writes <paramref name="records"/> to <paramref name="path"/> (created or replaced). Returns the number written.</summary>
    public static long Write(string path, IEnumerable<ObservationRecord> records)
    {
        using var stream = new FileStream(path, FileMode.Create, FileAccess.Write, FileShare.None, 1 << 16);
        return Write(stream, records);
    }

    /// <summary>Writes <paramref name="records"/> to <paramref name="stream"/> (left open). Returns the number written.</summary>
    public static long Write(Stream stream, IEnumerable<ObservationRecord> records)
    {
        using var writer = new MeasurementLogWriter(stream, leaveOpen: true);
        foreach (var record in records)
        {
            writer.Write(record);
        }

        return writer.Count;
    }

    private enum Field
    {
        None,
        Type,
        Robot,
        Time,
        AnchorA,
        AnchorB,
        Ddiff,
        Speed,
        YawRate,
        Position,
        Yaw,
        TagOffset,
        Motion,
    }

    private static Field FieldOf(ReadOnlySpan<byte> name) => name switch
    {
        _ when name.SequenceEqual("type"u8) => Field.Type,
        _ when name.SequenceEqual("robot"u8) => Field.Robot,
        _ when name.SequenceEqual("t"u8) => Field.Time,
        _ when name.SequenceEqual("a"u8) => Field.AnchorA,
        _ when name.SequenceEqual("b"u8) => Field.AnchorB,
        _ when name.SequenceEqual("ddiff"u8) => Field.Ddiff,
        _ when name.SequenceEqual("v"u8) => Field.Speed,
        _ when name.SequenceEqual("w"u8) => Field.YawRate,
        _ when name.SequenceEqual("p"u8) => Field.Position,
        _ when name.SequenceEqual("yaw"u8) => Field.Yaw,
        _ when name.SequenceEqual("tag_offset"u8) => Field.TagOffset,
        _ when name.SequenceEqual("motion"u8) => Field.Motion,
        _ => Field.None,
    };

    private static ObservationRecord? ParseLine(ReadOnlySpan<byte> json, out DiagnosticSeverity severity, out string? message)
    {
        severity = DiagnosticSeverity.Error;
        string? type = null, robot = null, a = null, b = null, motion = null;
        double t = double.NaN, ddiff = double.NaN, v = double.NaN, w = double.NaN, yaw = double.NaN;
        Vector3D? p = null, offset = null;
        try
        {
            var reader = new Utf8JsonReader(json);
            if (!reader.Read() || reader.TokenType != JsonTokenType.StartObject)
            {
                message = "a record must be a JSON object";
                return null;
            }

            while (reader.Read() && reader.TokenType != JsonTokenType.EndObject)
            {
                var field = FieldOf(reader.ValueSpan);
                var name = field == Field.None ? null : reader.GetString();
                reader.Read();
                switch (field)
                {
                    case Field.Type: type = String(ref reader, name!); break;
                    case Field.Robot: robot = String(ref reader, name!); break;
                    case Field.AnchorA: a = String(ref reader, name!); break;
                    case Field.AnchorB: b = String(ref reader, name!); break;
                    case Field.Motion: motion = String(ref reader, name!); break;
                    case Field.Time: t = Number(ref reader, name!); break;
                    case Field.Ddiff: ddiff = Number(ref reader, name!); break;
                    case Field.Speed: v = Number(ref reader, name!); break;
                    case Field.YawRate: w = Number(ref reader, name!); break;
                    case Field.Yaw: yaw = Number(ref reader, name!); break;
                    case Field.Position: p = Vector(ref reader, name!); break;
                    case Field.TagOffset: offset = Vector(ref reader, name!); break;
                    default: reader.Skip(); break;
                }
            }

            if (reader.Read())
            {
                message = "unexpected content after the record";
                return null;
            }
        }
        catch (JsonException e)
        {
            message = "invalid JSON: " + CleanJsonMessage(e.Message);
            return null;
        }
        catch (FormatException e)
        {
            message = e.Message;
            return null;
        }

        if (type is null)
        {
            message = "missing field 'type'";
            return null;
        }

        if (string.IsNullOrEmpty(robot))
        {
            message = $"{type} record: missing field 'robot'";
            return null;
        }

        message = null;
        switch (type)
        {
            case "robot":
                if (offset is null)
                {
                    message = "robot record: missing field 'tag_offset'";
                    return null;
                }

                MotionModelKind kind;
                switch (motion)
                {
                    case null or "planar": kind = MotionModelKind.PlanarOdometry; break;
                    case "cv": kind = MotionModelKind.ConstantVelocity3D; break;
                    default:
                        message = $"robot record: unknown motion '{motion}' (expected 'planar' or 'cv')";
                        return null;
                }

                return new RobotRecord(robot, offset.Value, kind);
            case "tdoa":
                if (Missing(t, "t", type, ref message) || Missing(ddiff, "ddiff", type, ref message))
                {
                    return null;
                }

                if (string.IsNullOrEmpty(a) || string.IsNullOrEmpty(b))
                {
                    message = "tdoa record: missing field 'a' or 'b'";
                    return null;
                }

                return new TdoaRecord(t, robot, a, b, ddiff);
            case "odom":
                if (Missing(t, "t", type, ref message) || Missing(v, "v", type, ref message) || Missing(w, "w", type, ref message))
                {
                    return null;
                }

                return new OdometryRecord(t, robot, v, w);
            case "truth":
                if (Missing(t, "t", type, ref message) || Missing(yaw, "yaw", type, ref message))
                {
                    return null;
                }

                if (p is null)
                {
                    message = "truth record: missing field 'p'";
                    return null;
                }

                return new TruthRecord(t, robot, p.Value, yaw);
            default:
                severity = DiagnosticSeverity.Warning;
                message = $"skipped record of unknown type '{type}'";
                return null;
        }
    }

    private static bool Missing(double value, string name, string type, ref string? message)
    {
        if (double.IsNaN(value))
        {
            message = $"{type} record: missing field '{name}'";
            return true;
        }

        return false;
    }

    private static string String(ref Utf8JsonReader reader, string name) =>
        reader.TokenType == JsonTokenType.String ? reader.GetString()! : throw new FormatException($"field '{name}' must be a string");

    private static double Number(ref Utf8JsonReader reader, string name)
    {
        if (reader.TokenType != JsonTokenType.Number)
        {
            throw new FormatException($"field '{name}' must be a number");
        }

        if (!reader.TryGetDouble(out var value) || !double.IsFinite(value))
        {
            throw new FormatException($"field '{name}' is not a finite number");
        }

        return value;
    }

    private static Vector3D Vector(ref Utf8JsonReader reader, string name)
    {
        if (reader.TokenType != JsonTokenType.StartArray)
        {
            throw new FormatException($"field '{name}' must be an array of 3 numbers");
        }

        Span<double> values = stackalloc double[3];
        var count = 0;
        while (reader.Read() && reader.TokenType != JsonTokenType.EndArray)
        {
            if (count == 3)
            {
                throw new FormatException($"field '{name}' must be an array of 3 numbers");
            }

            values[count++] = Number(ref reader, name);
        }

        if (count != 3)
        {
            throw new FormatException($"field '{name}' must be an array of 3 numbers");
        }

        return new Vector3D(values[0], values[1], values[2]);
    }

    private static string CleanJsonMessage(string message)
    {
        var cut = message.IndexOf(" LineNumber:", StringComparison.Ordinal);
        return (cut > 0 ? message[..cut] : message).TrimEnd('.', ' ');
    }
}

/// <summary>
/// Writes measurement-log records one per line with <see cref="Utf8JsonWriter"/> (shortest round-trip doubles,
/// invariant). Non-finite numbers are refused with <see cref="ArgumentException"/>, since JSON cannot hold them.
/// </summary>
public sealed class MeasurementLogWriter : IDisposable
{
    private static readonly JsonEncodedText TypeName = JsonEncodedText.Encode("type");
    private static readonly JsonEncodedText RobotName = JsonEncodedText.Encode("robot");
    private static readonly JsonEncodedText TimeName = JsonEncodedText.Encode("t");

    private readonly Stream _stream;
    private readonly bool _leaveOpen;
    private readonly ArrayBufferWriter<byte> _buffer = new(1 << 16);
    private readonly Utf8JsonWriter _json;

    public MeasurementLogWriter(Stream stream, bool leaveOpen = false)
    {
        _stream = stream;
        _leaveOpen = leaveOpen;
        _json = new Utf8JsonWriter(_buffer, new JsonWriterOptions { Indented = false, Encoder = System.Text.Encodings.Web.JavaScriptEncoder.UnsafeRelaxedJsonEscaping });
    }

    /// <summary>Records written so far.</summary>
    public long Count { get; private set; }

    public void Write(ObservationRecord record)
    {
        ArgumentNullException.ThrowIfNull(record);
        _json.Reset(_buffer);
        _json.WriteStartObject();
        switch (record)
        {
            case RobotRecord r:
                _json.WriteString(TypeName, "robot");
                _json.WriteString(RobotName, r.Robot);
                WriteVector("tag_offset", r.TagOffset);
                _json.WriteString("motion", r.Motion == MotionModelKind.ConstantVelocity3D ? "cv" : "planar");
                break;
            case TdoaRecord r:
                _json.WriteString(TypeName, "tdoa");
                _json.WriteNumber(TimeName, Finite(r.Time, "t"));
                _json.WriteString(RobotName, r.Robot);
                _json.WriteString("a", r.AnchorA);
                _json.WriteString("b", r.AnchorB);
                _json.WriteNumber("ddiff", Finite(r.DistanceDifference, "ddiff"));
                break;
            case OdometryRecord r:
                _json.WriteString(TypeName, "odom");
                _json.WriteNumber(TimeName, Finite(r.Time, "t"));
                _json.WriteString(RobotName, r.Robot);
                _json.WriteNumber("v", Finite(r.ForwardSpeed, "v"));
                _json.WriteNumber("w", Finite(r.YawRate, "w"));
                break;
            case TruthRecord r:
                _json.WriteString(TypeName, "truth");
                _json.WriteNumber(TimeName, Finite(r.Time, "t"));
                _json.WriteString(RobotName, r.Robot);
                WriteVector("p", r.TagPosition);
                _json.WriteNumber("yaw", Finite(r.Yaw, "yaw"));
                break;
            default:
                throw new ArgumentException($"cannot write a record of type {record.GetType().Name}", nameof(record));
        }

        _json.WriteEndObject();
        _json.Flush();
        _buffer.Write("\n"u8);
        Count++;

        // Hand full chunks to the stream; keeps memory flat for long logs.
        if (_buffer.WrittenCount >= 48 * 1024)
        {
            FlushBuffer();
        }
    }

    public void Flush()
    {
        FlushBuffer();
        _stream.Flush();
    }

    public void Dispose()
    {
        Flush();
        _json.Dispose();
        if (!_leaveOpen)
        {
            _stream.Dispose();
        }
    }

    private void FlushBuffer()
    {
        if (_buffer.WrittenCount > 0)
        {
            _stream.Write(_buffer.WrittenSpan);
            _buffer.ResetWrittenCount();
        }
    }

    private void WriteVector(string name, Vector3D v)
    {
        _json.WriteStartArray(name);
        _json.WriteNumberValue(Finite(v.X, name));
        _json.WriteNumberValue(Finite(v.Y, name));
        _json.WriteNumberValue(Finite(v.Z, name));
        _json.WriteEndArray();
    }

    private static double Finite(double value, string name) =>
        double.IsFinite(value) ? value : throw new ArgumentException($"field '{name}' is not finite ({value})", nameof(value));
}
