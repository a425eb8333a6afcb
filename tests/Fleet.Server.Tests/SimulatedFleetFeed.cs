using System.Diagnostics;
using Fleet.Contracts.V1;
using Fleet.Data;
using Fleet.Estimation.Measurements;
using Fleet.Server.Clients;
using Fleet.Simulation;
using Grpc.Core;

namespace Fleet.Server.Tests;

/// <summary>
/// A simulated Harbor Point fleet streamed through a real gRPC ingest call at a fixed speed-up, as `fleet demo` does,
/// until stopped. Writes the layout as a site file so the live view can show the racks.
/// </summary>
internal sealed class SimulatedFleetFeed : IAsyncDisposable
{
    private readonly CancellationTokenSource _stop = new();
    private Task? _run;

    public SimulatedFleetFeed(int robots, int seed, string directory)
    {
        Generator = new MeasurementGenerator(new SimulationOptions { Layout = WarehouseSites.Low, RobotCount = robots, DurationSeconds = 600, Seed = seed });
        Directory.CreateDirectory(directory);
        SiteFilePath = Path.Combine(directory, "harbor-low.json");
        SiteFile.Write(SiteFilePath, Generator.Layout);
    }

    public MeasurementGenerator Generator { get; }

    public string SiteFilePath { get; }

    public long Batches { get; private set; }

    /// <summary>Registers the site, its anchors and robots over gRPC, then starts streaming in the background.</summary>
    public async Task StartAsync(ServerHarness server, string siteId, double speed)
    {
        await SiteSetup.ApplyAsync(server.Sites, siteId, Generator.Layout.Anchors, Generator.Robots, "Harbor Point DC (invented)");
        _run = Task.Run(() => DriveAsync(server.Ingest, siteId, speed, _stop.Token));
    }

    private async Task DriveAsync(IngestService.IngestServiceClient client, string siteId, double speed, CancellationToken cancellationToken)
    {
        const double batchSeconds = 0.05;
        try
        {
            using var call = client.StreamMeasurements(cancellationToken: cancellationToken);
            var acknowledgements = Task.Run(async () =>
            {
                await foreach (var _ in call.ResponseStream.ReadAllAsync(cancellationToken))
                {
                }
            }, cancellationToken);

            var batcher = new MeasurementBatcher(siteId);
            var clock = Stopwatch.StartNew();
            var nextFlush = batchSeconds;
            foreach (var record in Generator.Generate())
            {
                var time = record switch { TdoaRecord t => t.Time, OdometryRecord o => o.Time, TruthRecord t => t.Time, _ => 0.0 };
                while (time >= nextFlush)
                {
                    if (batcher.Count > 0)
                    {
                        await call.RequestStream.WriteAsync(new StreamMeasurementsRequest { Batch = batcher.TakeBatch((ulong)++Batches) }, cancellationToken);
                    }

                    // Pacing the feed, not synchronising the test: the simulated fleet moves at `speed` × real time.
                    var wait = TimeSpan.FromSeconds(nextFlush / speed) - clock.Elapsed;
                    if (wait > TimeSpan.Zero)
                    {
                        await Task.Delay(wait, cancellationToken);
                    }

                    nextFlush += batchSeconds;
                }

                if (record is not TruthRecord)
                {
                    batcher.Add(record);
                }
            }

            await call.RequestStream.CompleteAsync();
            await acknowledgements;
        }
        catch (Exception e) when (e is OperationCanceledException or ObjectDisposedException || (e is RpcException r && r.StatusCode == StatusCode.Cancelled))
        {
            // Stopped by the test.
        }
    }

    /// <summary>Stops streaming (idempotent); call it before the server goes away.</summary>
    public async Task StopAsync()
    {
        if (!_stop.IsCancellationRequested)
        {
            await _stop.CancelAsync();
        }

        if (_run is not null)
        {
            await _run.WaitAsync(TimeSpan.FromSeconds(30));
        }
    }

    public async ValueTask DisposeAsync()
    {
        await StopAsync();
        _stop.Dispose();
    }
}
