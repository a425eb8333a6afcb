using Fleet.Contracts.V1;
using Fleet.Server.Recording;

namespace Fleet.Server.Tests;

public sealed class RecordingTests
{
    [Fact]
    public async Task SubmitMeasurements_RecordingOn_WritesEachBatchLengthDelimited()
    {
        var dataDirectory = ServerHarness.NewDataDirectory();
        var recordings = Path.Combine(dataDirectory, "recordings");
        try
        {
            var sent = new List<MeasurementBatch>();
            await using (var server = await ServerHarness.StartAsync(dataDirectory, new Dictionary<string, string?> { ["Fleet:Server:RecordingDirectory"] = recordings }))
            {
                var deadline = DateTime.UtcNow.AddSeconds(30);
                await server.Sites.CreateSiteAsync(new CreateSiteRequest { SiteId = "rec" }, deadline: deadline);
                await server.Sites.PutAnchorMapAsync(TestScenario.AnchorMapRequest("rec"), deadline: deadline);
                for (var i = 0; i < 3; i++)
                {
                    var batch = new MeasurementBatch { SiteId = "rec", BatchId = (ulong)i, ReceiveTime = TestScenario.Time(1_700_000_100 + i) };
                    batch.Robots.Add(TestScenario.StaticTagSamples("tug-03", (5, 5, 0.5), i * 10, 10));
                    sent.Add(batch.Clone());
                    await server.Ingest.SubmitMeasurementsAsync(new SubmitMeasurementsRequest { Batch = batch }, deadline: deadline);
                }
            }

            // Stopping the server flushes the recording.
            var file = Assert.Single(Directory.GetFiles(Path.Combine(recordings, "rec"), "*" + IngestRecorder.FileExtension));
            await using var stream = File.OpenRead(file);
            var read = IngestRecorder.Read(stream).ToList();
            Assert.Equal(sent, read);
        }
        finally
        {
            try
            {
                Directory.Delete(dataDirectory, recursive: true);
            }
            catch (IOException)
            {
                // Left for the OS to clean.
            }
        }
    }
}
