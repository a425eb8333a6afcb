using Fleet.Contracts.V1;
using Fleet.Data;
using Fleet.Server.Recording;
using Google.Protobuf;

namespace Fleet.Server.Tests;

public sealed class RecordingReaderTests
{
    [Theory]
    [InlineData(1)] // the length prefix of the third record cut after one byte
    [InlineData(7)] // the third record's body cut short
    public void ReadBatches_TornTail_ReturnsCompleteRecordsAndWarnsWithOffset(int bytesOfThird)
    {
        var (bytes, recordStarts) = ThreeRecords();
        var torn = bytes.AsSpan(0, (int)recordStarts[2] + bytesOfThird).ToArray();
        var diagnostics = new List<DataDiagnostic>();

        var read = RecordingReader.ReadBatches(new MemoryStream(torn), "run.fleetrec", diagnostics.Add).ToList();

        Assert.Equal([1UL, 2UL], read.Select(b => b.BatchId));
        var warning = Assert.Single(diagnostics);
        Assert.Equal(DiagnosticSeverity.Warning, warning.Severity);
        // Record boundaries follow the length-delimited framing of protobuf's writeDelimitedTo (protobuf.dev, encoding).
        Assert.StartsWith($"run.fleetrec: byte {recordStarts[2]}: torn record", warning.ToString(), StringComparison.Ordinal);
    }

    [Fact]
    public void ReadBatches_ZeroFilledTail_StopsAtTheZeros()
    {
        var (bytes, recordStarts) = ThreeRecords();
        var damaged = bytes.Concat(new byte[64]).ToArray();
        var diagnostics = new List<DataDiagnostic>();

        var read = RecordingReader.ReadBatches(new MemoryStream(damaged), "run.fleetrec", diagnostics.Add).ToList();

        Assert.Equal(3, read.Count);
        Assert.Contains($"byte {bytes.Length}: damaged record", Assert.Single(diagnostics).Message, StringComparison.Ordinal);
        Assert.Equal(3, recordStarts.Length);
    }

    [Fact]
    public void ReadBatches_IntactFile_NoDiagnostics()
    {
        var (bytes, _) = ThreeRecords();
        var diagnostics = new List<DataDiagnostic>();
        Assert.Equal(3, RecordingReader.ReadBatches(new MemoryStream(bytes), "run.fleetrec", diagnostics.Add).Count());
        Assert.Empty(diagnostics);
    }

    private static (byte[] Bytes, long[] RecordStarts) ThreeRecords()
    {
        using var stream = new MemoryStream();
        var starts = new long[3];
        for (var i = 0; i < 3; i++)
        {
            starts[i] = stream.Position;
            var batch = new MeasurementBatch { SiteId = "rec", BatchId = (ulong)(i + 1) };
            batch.Robots.Add(TestScenario.StaticTagSamples("tug-03", (5, 5, 0.5), i * 10, 10));
            batch.WriteDelimitedTo(stream);
        }

        return (stream.ToArray(), starts);
    }
}
