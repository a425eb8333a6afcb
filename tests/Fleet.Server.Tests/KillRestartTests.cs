using Fleet.Contracts.V1;
using Fleet.Data;
using Fleet.Server.Clients;
using Fleet.Server.Recording;
using Fleet.Server.Registry;
using Google.Protobuf;
using Grpc.Core;
using Grpc.Net.Client;

namespace Fleet.Server.Tests;

/// <summary>
/// A server process killed with SIGKILL while a client streams measurements, then restarted on the same data directory
/// and ports: what was committed is there, the client's stream reconnects and loses no batch, robots resume.
/// </summary>
[Trait("Category", "Reliability")]
public sealed class KillRestartTests
{
    private const string Site = "kill-restart";
    private static readonly (string Id, (double X, double Y, double Z) P)[] Robots =
    [
        ("tug-01", (4.0, 3.0, 0.5)),
        ("tug-02", (15.0, 9.0, 0.5)),
        ("tug-03", (9.0, 6.0, 0.5)),
    ];

    [Fact]
    public async Task KillDuringIngest_RestartOnSameData_KeepsCommittedDataAndLosesNoBatch()
    {
        var dataDirectory = ServerHarness.NewDataDirectory();
        var recordings = Path.Combine(dataDirectory, "recordings");
        var ports = ServerProcess.FreePorts();
        var address = ServerProcess.Address(ports);
        string[] settings = [$"--Fleet:Server:RecordingDirectory={recordings}", "--Fleet:Grains:RegistryFlushInterval=00:00:00.500"];
        using var channel = GrpcChannel.ForAddress(address);
        var sites = new SiteService.SiteServiceClient(channel);
        var poses = new PoseService.PoseServiceClient(channel);
        var policy = new IngestRetryPolicy { InitialBackoff = TimeSpan.FromMilliseconds(50), MaxBackoff = TimeSpan.FromSeconds(1) };
        var stream = new ReconnectingIngestStream(new IngestService.IngestServiceClient(channel), policy, maxUnacknowledged: 16, seed: 5);
        using var stopDriving = new CancellationTokenSource();
        var sample = 0;
        Task? driver = null;
        try
        {
            await using (var first = ServerProcess.Start(dataDirectory, ports, settings))
            {
                await first.WaitReadyAsync(address, TimeSpan.FromSeconds(90));

                // The shared channel may have tried (and backed off) before the process listened: connect it now.
                await channel.ConnectAsync().WaitAsync(TimeSpan.FromSeconds(60));
                await sites.CreateSiteAsync(new CreateSiteRequest { SiteId = Site, DisplayName = "Harbor Point DC" }, deadline: Deadline());
                await sites.PutAnchorMapAsync(TestScenario.AnchorMapRequest(Site), deadline: Deadline());
                await sites.PutAnchorMapAsync(TestScenario.AnchorMapRequest(Site), deadline: Deadline());
                var model = ByteString.CopyFrom(TestModels.ZeroModelBytes());
                await sites.UploadBiasModelAsync(new UploadBiasModelRequest { SiteId = Site, Model = model, Description = "one", Activate = true }, deadline: Deadline());
                await sites.UploadBiasModelAsync(new UploadBiasModelRequest { SiteId = Site, Model = model, Description = "two", Activate = false }, deadline: Deadline());

                driver = Task.Run(async () =>
                {
                    for (ulong batchId = 1; !stopDriving.IsCancellationRequested; batchId++)
                    {
                        var batch = new MeasurementBatch { SiteId = Site, BatchId = batchId };
                        foreach (var (id, p) in Robots)
                        {
                            batch.Robots.Add(TestScenario.StaticTagSamples(id, p, sample, 10));
                        }

                        sample += 10;
                        await stream.SendAsync(batch, stopDriving.Token);
                        await Task.Delay(10, stopDriving.Token);
                    }
                });

                // Mid-ingest: every robot tracked and its pose checkpoint written, batches still flowing.
                using var registry = new SqliteSiteRegistry(dataDirectory, TimeProvider.System);
                await Poll(() => Robots.All(r => registry.GetPose(Site, r.Id) is not null) && stream.Acknowledged > 20);
                await first.KillAsync();
            }

            var sentAtKill = stream.Sent;
            await using var second = ServerProcess.Start(dataDirectory, ports, settings);
            await second.WaitReadyAsync(address, TimeSpan.FromSeconds(90));

            // The shared channel saw connections refused while the server was down and backs off; unary calls fail
            // fast until it reconnects (gRPC connectivity semantics), so wait for it.
            await channel.ConnectAsync().WaitAsync(TimeSpan.FromSeconds(60));

            // Every admin change committed before the kill is there.
            var site = (await sites.GetSiteAsync(new GetSiteRequest { SiteId = Site }, deadline: Deadline())).Site;
            Assert.Equal(2U, site.AnchorMapVersion);
            Assert.Equal(1U, site.BiasModelVersion);
            var models = (await sites.ListBiasModelsAsync(new ListBiasModelsRequest { SiteId = Site }, deadline: Deadline())).BiasModels;
            Assert.Equal(["one", "two"], models.Select(m => m.Description));

            // The client reconnects by itself and delivers everything: no batch is lost.
            await Poll(() => stream.Sent > sentAtKill + 20 && stream.Acknowledged > sentAtKill);
            await stopDriving.CancelAsync();
            await AwaitStopped(driver);
            await stream.FlushAsync().WaitAsync(TimeSpan.FromSeconds(60));
            Assert.Equal(stream.Sent, stream.Acknowledged);
            Assert.True(stream.Reconnects >= 1);

            // Robots come back near their last pose (closed-form truth of the static tags, TestScenario).
            foreach (var (id, p) in Robots)
            {
                var pose = (await poses.GetPoseAsync(new GetPoseRequest { SiteId = Site, RobotId = id }, deadline: Deadline())).Pose;
                Assert.InRange(Math.Sqrt(Math.Pow(pose.TagPosition.X - p.X, 2) + Math.Pow(pose.TagPosition.Y - p.Y, 2)), 0, 0.3);
            }

            // The first run's recording may end in a torn record; it reads up to it with at most one warning per file.
            var diagnostics = new List<DataDiagnostic>();
            var files = Directory.GetFiles(Path.Combine(recordings, Site), "*" + IngestRecorder.FileExtension);
            Assert.Equal(2, files.Length);
            var batches = files.Sum(f => RecordingReader.ReadBatches(f, diagnostics.Add).Count());
            Assert.True(batches > 0);
            Assert.True(diagnostics.Count <= files.Length);
            Assert.All(diagnostics, d => Assert.Contains("byte ", d.Message, StringComparison.Ordinal));
        }
        finally
        {
            await stopDriving.CancelAsync();
            if (driver is not null)
            {
                // Already awaited on success; here only so a failing test does not leave it running.
                await Task.WhenAny(driver, Task.Delay(TimeSpan.FromSeconds(30)));
            }

            await stream.DisposeAsync();
            TryDelete(dataDirectory);
        }
    }

    [Fact]
    public async Task Resume_RestartWithStoredPose_TracksFromFewerSamplesThanAFreshFix()
    {
        // A fresh filter needs FilterOptions.InitBurstCount (10) TDOAs before its first fix; a resumed one answers
        // after the first three.
        const string robot = "tug-09";
        var p = (X: 12.0, Y: 4.0, Z: 0.5);
        var dataDirectory = ServerHarness.NewDataDirectory();
        var settings = new Dictionary<string, string?> { ["Fleet:Grains:RegistryFlushInterval"] = "00:00:00.200" };
        try
        {
            await using (var first = await ServerHarness.StartAsync(dataDirectory, settings))
            {
                await first.Sites.CreateSiteAsync(new CreateSiteRequest { SiteId = Site }, deadline: Deadline());
                await first.Sites.PutAnchorMapAsync(TestScenario.AnchorMapRequest(Site), deadline: Deadline());
                var batch = new MeasurementBatch { SiteId = Site };
                batch.Robots.Add(TestScenario.StaticTagSamples(robot, p, 0, 200));
                await first.Ingest.SubmitMeasurementsAsync(new SubmitMeasurementsRequest { Batch = batch }, deadline: Deadline());
                using var registry = new SqliteSiteRegistry(dataDirectory, TimeProvider.System);
                await Poll(() => registry.GetPose(Site, robot) is not null);
            }

            await using var second = await ServerHarness.StartAsync(dataDirectory, settings);
            var resumed = new MeasurementBatch { SiteId = Site };
            resumed.Robots.Add(TestScenario.StaticTagSamples(robot, p, 250, 3));
            await second.Ingest.SubmitMeasurementsAsync(new SubmitMeasurementsRequest { Batch = resumed }, deadline: Deadline());
            var pose = (await second.Poses.GetPoseAsync(new GetPoseRequest { SiteId = Site, RobotId = robot }, deadline: Deadline())).Pose;
            Assert.NotEqual(TrackingState.Acquiring, pose.TrackingState);
            Assert.InRange(Math.Sqrt(Math.Pow(pose.TagPosition.X - p.X, 2) + Math.Pow(pose.TagPosition.Y - p.Y, 2)), 0, 0.3);

            // A robot without a stored pose gets no track from three samples.
            var fresh = new MeasurementBatch { SiteId = Site };
            fresh.Robots.Add(TestScenario.StaticTagSamples("tug-10", p, 250, 3));
            await second.Ingest.SubmitMeasurementsAsync(new SubmitMeasurementsRequest { Batch = fresh }, deadline: Deadline());
            var e = await Assert.ThrowsAsync<RpcException>(() => second.Poses.GetPoseAsync(new GetPoseRequest { SiteId = Site, RobotId = "tug-10" }, deadline: Deadline()).ResponseAsync);
            Assert.Equal(StatusCode.NotFound, e.StatusCode);
        }
        finally
        {
            TryDelete(dataDirectory);
        }
    }

    internal static async Task Poll(Func<bool> condition, double timeoutSeconds = 60)
    {
        var deadline = DateTime.UtcNow.AddSeconds(timeoutSeconds);
        while (!condition())
        {
            if (DateTime.UtcNow > deadline)
            {
                throw new TimeoutException("condition not met in time");
            }

            await Task.Delay(50);
        }
    }

    private static async Task AwaitStopped(Task task)
    {
        try
        {
            await task.WaitAsync(TimeSpan.FromSeconds(30));
        }
        catch (OperationCanceledException)
        {
            // Stopped by the test.
        }
    }

    internal static void TryDelete(string directory)
    {
        try
        {
            Directory.Delete(directory, recursive: true);
        }
        catch (IOException)
        {
            // Left for the OS to clean.
        }
    }

    private static DateTime Deadline() => DateTime.UtcNow.AddSeconds(30);
}
