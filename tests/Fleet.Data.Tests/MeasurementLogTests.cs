using System.Text;
using Fleet.Estimation.Filtering;
using Fleet.Estimation.Geometry;
using Fleet.Estimation.Measurements;
using Fleet.Simulation;

namespace Fleet.Data.Tests;

public class MeasurementLogTests
{
    [Fact]
    public void WriteThenRead_SimulatorOutput_RoundTripsExactly()
    {
        var records = new MeasurementGenerator(new SimulationOptions { DurationSeconds = 10, ConstantVelocityFraction = 0.5 }).Generate().ToList();
        using var stream = new MemoryStream();
        var written = MeasurementLog.Write(stream, records);
        stream.Position = 0;

        var diagnostics = new List<DataDiagnostic>();
        var back = MeasurementLog.Read(stream, "sim.jsonl", diagnostics.Add).ToList();

        Assert.Equal(records.Count, written);
        Assert.Empty(diagnostics);
        Assert.Equal(records, back);
        Assert.Contains(back, r => r is RobotRecord { Motion: MotionModelKind.ConstantVelocity3D });
    }

    [Fact]
    public void WriteThenRead_File_RoundTrips()
    {
        var records = new MeasurementGenerator(new SimulationOptions { DurationSeconds = 3, RobotCount = 2 }).Generate().ToList();
        var path = Path.Combine(Path.GetTempPath(), $"fleet-log-{Guid.NewGuid():N}.jsonl");
        try
        {
            MeasurementLog.Write(path, records);
            var diagnostics = new List<DataDiagnostic>();
            Assert.Equal(records, MeasurementLog.Read(path, diagnostics.Add).ToList());
            Assert.Empty(diagnostics);
        }
        finally
        {
            File.Delete(path);
        }
    }

    [Fact]
    public void Write_Format_MatchesDesignExample()
    {
        ObservationRecord[] records =
        [
            new RobotRecord("R07", new Vector3D(0.1, 0, 0.45)),
            new TdoaRecord(12.34, "R07", "N01", "N02", 0.8123),
            new OdometryRecord(12.345, "R07", 1.2, 0.05),
            new TruthRecord(12.35, "R07", new Vector3D(10.1, 4.2, 0.45), 1.571),
        ];
        using var stream = new MemoryStream();
        MeasurementLog.Write(stream, records);
        var lines = Encoding.UTF8.GetString(stream.ToArray()).Split('\n');

        // DESIGN.md "Measurement log".
        Assert.Equal("""{"type":"robot","robot":"R07","tag_offset":[0.1,0,0.45],"motion":"planar"}""", lines[0]);
        Assert.Equal("""{"type":"tdoa","t":12.34,"robot":"R07","a":"N01","b":"N02","ddiff":0.8123}""", lines[1]);
        Assert.Equal("""{"type":"odom","t":12.345,"robot":"R07","v":1.2,"w":0.05}""", lines[2]);
        Assert.Equal("""{"type":"truth","t":12.35,"robot":"R07","p":[10.1,4.2,0.45],"yaw":1.571}""", lines[3]);
        Assert.Equal(string.Empty, lines[4]);
    }

    [Fact]
    public void Read_MalformedLineThree_ReportedAsLineThreeOthersRead()
    {
        const string text = """
            {"type":"robot","robot":"tug-01","tag_offset":[0.1,0,0.45]}
            {"type":"tdoa","t":0.01,"robot":"tug-01","a":"HP-A01","b":"HP-A02","ddiff":0.5}
            {"type":"tdoa","t":0.02,"robot":"tug-01","a":"HP-A01","b":
            {"type":"odom","t":0.05,"robot":"tug-01","v":1.0,"w":0.0}
            {"type":"truth","t":0.1,"robot":"tug-01","p":[1,2,0.45],"yaw":0.0}
            """;
        var diagnostics = new List<DataDiagnostic>();
        var records = MeasurementLog.Read(new MemoryStream(Encoding.UTF8.GetBytes(text)), "log.jsonl", diagnostics.Add).ToList();

        Assert.Equal(4, records.Count);
        var d = Assert.Single(diagnostics);
        Assert.Equal(3, d.Line);
        Assert.Equal(DiagnosticSeverity.Error, d.Severity);
        Assert.StartsWith("log.jsonl:3: ", d.ToString());
    }

    [Fact]
    public void Read_UnknownType_WarnsAndSkips()
    {
        const string text = """
            {"type":"robot","robot":"tug-01","tag_offset":[0,0,0.5],"motion":"cv"}
            {"type":"battery","t":1.0,"robot":"tug-01","level":0.8}
            {"type":"tdoa","t":1.0,"robot":"tug-01","a":"A","b":"B","ddiff":-0.25,"rssi":-80}
            """;
        var diagnostics = new List<DataDiagnostic>();
        var records = MeasurementLog.Read(new MemoryStream(Encoding.UTF8.GetBytes(text)), "log.jsonl", diagnostics.Add).ToList();

        Assert.Equal(2, records.Count);
        Assert.Equal(MotionModelKind.ConstantVelocity3D, Assert.IsType<RobotRecord>(records[0]).Motion);
        Assert.Equal(-0.25, Assert.IsType<TdoaRecord>(records[1]).DistanceDifference);
        var d = Assert.Single(diagnostics);
        Assert.Equal(DiagnosticSeverity.Warning, d.Severity);
        Assert.Equal(2, d.Line);
        Assert.Contains("battery", d.Message);
    }

    [Theory]
    [InlineData("""{"type":"tdoa","t":1,"robot":"r","a":"A","b":"B"}""", "missing field 'ddiff'")]
    [InlineData("""{"type":"odom","t":1,"robot":"r","v":"fast","w":0}""", "field 'v' must be a number")]
    [InlineData("""{"type":"truth","t":1,"robot":"r","p":[1,2],"yaw":0}""", "array of 3 numbers")]
    [InlineData("""{"type":"odom","t":1e999,"robot":"r","v":1,"w":0}""", "not a finite number")]
    [InlineData("""{"t":1,"robot":"r"}""", "missing field 'type'")]
    [InlineData("""{"type":"robot","robot":"r"}""", "missing field 'tag_offset'")]
    [InlineData("""{"type":"robot","robot":"r","tag_offset":[0,0,0],"motion":"hover"}""", "unknown motion")]
    [InlineData("""[1,2,3]""", "must be a JSON object")]
    [InlineData("""{"type":"odom","t":1,"robot":"r","v":1,"w":0} trailing""", "")]
    public void Read_BadRecord_ReportedWithLineAndReason(string line, string reason)
    {
        var text = "\n" + line + "\n";
        var diagnostics = new List<DataDiagnostic>();
        var records = MeasurementLog.Read(new MemoryStream(Encoding.UTF8.GetBytes(text)), "x.jsonl", diagnostics.Add).ToList();

        Assert.Empty(records);
        var d = Assert.Single(diagnostics);
        Assert.Equal(2, d.Line);
        Assert.Equal(DiagnosticSeverity.Error, d.Severity);
        Assert.Contains(reason, d.Message);
    }

    [Fact]
    public void Write_NonFinite_Throws()
    {
        using var stream = new MemoryStream();
        Assert.Throws<ArgumentException>(() => MeasurementLog.Write(stream, [new OdometryRecord(1, "r", double.NaN, 0)]));
    }

    [Fact]
    public void Read_IsLazy_StreamsRecords()
    {
        // An endless source: taking a few records must not read it all.
        var first = MeasurementLog.Read(new EndlessLog(), "endless", _ => { }).Take(3).ToList();
        Assert.Equal(3, first.Count);
    }

    private sealed class EndlessLog : Stream
    {
        private static readonly byte[] Line = """{"type":"odom","t":1,"robot":"r","v":1,"w":0}"""u8.ToArray().Append((byte)'\n').ToArray();
        private long _position;

        public override bool CanRead => true;

        public override bool CanSeek => false;

        public override bool CanWrite => false;

        public override long Length => throw new NotSupportedException();

        public override long Position { get => _position; set => throw new NotSupportedException(); }

        public override int Read(byte[] buffer, int offset, int count)
        {
            for (var i = 0; i < count; i++)
            {
                buffer[offset + i] = Line[(int)(_position++ % Line.Length)];
            }

            return count;
        }

        public override void Flush()
        {
        }

        public override long Seek(long offset, SeekOrigin origin) => throw new NotSupportedException();

        public override void SetLength(long value) => throw new NotSupportedException();

        public override void Write(byte[] buffer, int offset, int count) => throw new NotSupportedException();
    }
}
