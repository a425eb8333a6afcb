using System.Diagnostics;
using Fleet.Contracts.V1;
using Fleet.Estimation.Measurements;
using Fleet.Server.Clients;
using Fleet.Simulation;
using Grpc.Core;
using Grpc.Net.Client;

namespace Fleet.Server.Benchmarking;

/// <summary>Settings of <see cref="SoakBenchmark"/>.</summary>
public sealed record SoakBenchmarkOptions
{
    public double Minutes { get; init; } = 10;

    /// <summary>Robots streamed (replicas of <see cref="SimulatedTrajectories"/> simulated ones, renamed).</summary>
    public int Robots { get; init; } = 200;

    public int SimulatedTrajectories { get; init; } = 20;

    public double TdoaRateHz { get; init; } = 75;

    /// <summary>Seconds of data per batch (every robot in each batch), sent in real time.</summary>
    public double BatchSeconds { get; init; } = 0.1;

    /// <summary>Ingest streams (robots split across them).</summary>
    public int Streams { get; init; } = 4;

    /// <summary>A subscriber that connects, reads a few updates and drops is started this often (s).</summary>
    public double SubscriberChurnSeconds { get; init; } = 5;

    /// <summary>Memory is sampled after this warm-up (s) and at the end.</summary>
    public double WarmupSeconds { get; init; } = 20;

    public int Seed { get; init; } = 1;

    public string Layout { get; init; } = WarehouseSites.Tall;
}

/// <summary>Figures of one soak run.</summary>
public sealed record SoakBenchmarkResult
{
    public double Minutes { get; init; }
    public int Robots { get; init; }
    public long BatchesSent { get; init; }
    public long BatchesAcknowledged { get; init; }

    /// <summary>Sent minus acknowledged after the final flush: must be 0.</summary>
    public long LostAcknowledgements { get; init; }

    public long Reconnects { get; init; }
    public long Measurements { get; init; }
    public double MeasurementsPerSecond { get; init; }
    public double RejectedFraction { get; init; }

    /// <summary>Managed heap after a full collection, after warm-up and at the end (bytes).</summary>
    public long HeapStartBytes { get; init; }
    public long HeapEndBytes { get; init; }
    public long HeapGrowthBytes { get; init; }

    /// <summary>Process working set after warm-up and at the end (bytes).</summary>
    public long WorkingSetStartBytes { get; init; }
    public long WorkingSetEndBytes { get; init; }
    public long SubscribersDropped { get; init; }
    public long PoseUpdatesReceived { get; init; }
    public bool ServerAnsweredAfterwards { get; init; }
    public int Cores { get; init; } = Environment.ProcessorCount;
}

/// <summary>
/// A long run of a real server and real clients on loopback: simulated robots streamed in real time through
/// <see cref="ReconnectingIngestStream"/>s, one long-lived pose subscriber, and subscribers that connect and drop
/// mid-stream all along. Reports memory after warm-up and at the end, acknowledgements sent against received, and
/// throughput. Server and clients share the process, so memory figures include the client side.
/// </summary>
public static class SoakBenchmark
{
    public const string SiteId = "soak-site";

    public static async Task<SoakBenchmarkResult> RunAsync(SoakBenchmarkOptions options, Action<string>? log = null, CancellationToken cancellationToken = default)
    {
        log ??= _ => { };
        var duration = options.Minutes * 60;
        var generator = new MeasurementGenerator(new SimulationOptions
        {
            Seed = options.Seed,
            Layout = options.Layout,
            RobotCount = options.SimulatedTrajectories,
            DurationSeconds = duration,
            TdoaRateHz = options.TdoaRateHz,
        });
        var replicas = Math.Max(1, options.Robots / options.SimulatedTrajectories);
        var robots = generator.Robots.SelectMany(r => Enumerable.Range(0, replicas).Select(k => r with { Robot = Replica(r.Robot, k) })).ToList();
        var dataDirectory = Path.Combine(Path.GetTempPath(), "fleet-soak", Guid.NewGuid().ToString("N"));
        await using var server = await FleetServerHost.StartAsync([], builder => builder.Configuration.AddInMemoryCollection(new Dictionary<string, string?>
        {
            ["Fleet:Server:DataDirectory"] = dataDirectory,
            ["Fleet:Server:ListenAddress"] = "127.0.0.1",
            ["Fleet:Server:GrpcPort"] = "0",
            ["Fleet:Server:MetricsPort"] = "-1",
            ["Fleet:Server:SiloPort"] = "0",
            ["Fleet:Server:GatewayPort"] = "0",
            ["Fleet:LiveView:Port"] = "-1",
            ["Fleet:Security:AllowAnonymous"] = "true",
            ["Logging:LogLevel:Default"] = "Warning",
            ["Logging:LogLevel:Orleans.Runtime.Watchdog"] = "Error",
        }), cancellationToken: cancellationToken);
        try
        {
            using var channel = GrpcChannel.ForAddress(FleetServerHost.GetGrpcAddress(server));
            await SiteSetup.ApplyAsync(new SiteService.SiteServiceClient(channel), SiteId, generator.Layout.Anchors, robots, "soak", cancellationToken);
            var ingest = new IngestService.IngestServiceClient(channel);
            var poses = new PoseService.PoseServiceClient(channel);
            long accepted = 0, rejected = 0, measurements = 0, updates = 0, dropped = 0;
            var streams = Enumerable.Range(0, options.Streams).Select(_ => new ReconnectingIngestStream(ingest, maxUnacknowledged: 32, onAck: ack =>
            {
                Interlocked.Add(ref accepted, ack.Accepted + ack.DownWeighted + ack.Buffered);
                Interlocked.Add(ref rejected, ack.Rejected);
                Interlocked.Add(ref measurements, ack.Accepted + ack.DownWeighted + ack.Buffered + ack.Rejected);
            })).ToArray();

            using var stopSubscribers = CancellationTokenSource.CreateLinkedTokenSource(cancellationToken);
            var watcher = WatchAsync(poses, n => Interlocked.Add(ref updates, n), stopSubscribers.Token);
            var churn = ChurnAsync(poses, options.SubscriberChurnSeconds, () => Interlocked.Increment(ref dropped), stopSubscribers.Token);

            long heapStart = 0, workingSetStart = 0;
            var clock = Stopwatch.StartNew();
            var batchers = Enumerable.Range(0, options.Streams).Select(_ => new MeasurementBatcher(SiteId)).ToArray();
            ulong batchId = 0;
            var nextFlush = options.BatchSeconds;
            var warmedUp = false;
            var lastLog = 0.0;
            foreach (var record in generator.Generate())
            {
                var time = record switch { TdoaRecord t => t.Time, OdometryRecord o => o.Time, _ => double.NaN };
                if (double.IsNaN(time))
                {
                    continue;
                }

                while (time >= nextFlush)
                {
                    batchId++;
                    for (var s = 0; s < batchers.Length; s++)
                    {
                        if (batchers[s].Count > 0)
                        {
                            await streams[s].SendAsync(batchers[s].TakeBatch(batchId), cancellationToken);
                        }
                    }

                    var wait = TimeSpan.FromSeconds(nextFlush) - clock.Elapsed;
                    if (wait > TimeSpan.Zero)
                    {
                        await Task.Delay(wait, cancellationToken);
                    }

                    nextFlush += options.BatchSeconds;
                    if (!warmedUp && nextFlush >= options.WarmupSeconds)
                    {
                        warmedUp = true;
                        (heapStart, workingSetStart) = Memory();
                        log($"warm: heap {heapStart / 1e6:F1} MB, working set {workingSetStart / 1e6:F1} MB");
                    }

                    if (nextFlush - lastLog >= 60)
                    {
                        lastLog = nextFlush;
                        log($"{nextFlush / 60:F0} min: {Interlocked.Read(ref measurements)} measurements acknowledged, heap {GC.GetTotalMemory(false) / 1e6:F1} MB");
                    }
                }

                for (var k = 0; k < replicas; k++)
                {
                    var robot = Replica(record.Robot, k);
                    var copy = record switch
                    {
                        TdoaRecord t => (ObservationRecord)(t with { Robot = robot }),
                        OdometryRecord o => o with { Robot = robot },
                        _ => record,
                    };
                    batchers[(int)((uint)robot.GetHashCode(StringComparison.Ordinal) % (uint)batchers.Length)].Add(copy);
                }
            }

            batchId++;
            for (var s = 0; s < batchers.Length; s++)
            {
                if (batchers[s].Count > 0)
                {
                    await streams[s].SendAsync(batchers[s].TakeBatch(batchId), cancellationToken);
                }
            }

            foreach (var stream in streams)
            {
                await stream.FlushAsync(cancellationToken).WaitAsync(TimeSpan.FromMinutes(2), cancellationToken);
            }

            var seconds = clock.Elapsed.TotalSeconds;
            var (heapEnd, workingSetEnd) = Memory();
            await stopSubscribers.CancelAsync();
            await Task.WhenAll(watcher, churn);

            // The server still answers a plain call after all of it.
            var site = await new SiteService.SiteServiceClient(channel).GetSiteAsync(new GetSiteRequest { SiteId = SiteId }, deadline: DateTime.UtcNow.AddSeconds(30), cancellationToken: cancellationToken);
            var result = new SoakBenchmarkResult
            {
                Minutes = options.Minutes,
                Robots = robots.Count,
                BatchesSent = streams.Sum(s => s.Sent),
                BatchesAcknowledged = streams.Sum(s => s.Acknowledged),
                LostAcknowledgements = streams.Sum(s => s.Sent - s.Acknowledged),
                Reconnects = streams.Sum(s => s.Reconnects),
                Measurements = measurements,
                MeasurementsPerSecond = measurements / seconds,
                RejectedFraction = measurements > 0 ? (double)rejected / measurements : 0,
                HeapStartBytes = heapStart,
                HeapEndBytes = heapEnd,
                HeapGrowthBytes = heapEnd - heapStart,
                WorkingSetStartBytes = workingSetStart,
                WorkingSetEndBytes = workingSetEnd,
                SubscribersDropped = dropped,
                PoseUpdatesReceived = updates,
                ServerAnsweredAfterwards = site.Site.SiteId == SiteId,
            };
            foreach (var stream in streams)
            {
                await stream.DisposeAsync();
            }

            await server.StopAsync(cancellationToken);
            return result;
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

    private static string Replica(string robot, int k) => k == 0 ? robot : $"{robot}-r{k}";

    private static (long Heap, long WorkingSet) Memory()
    {
        var heap = GC.GetTotalMemory(forceFullCollection: true);
        using var process = Process.GetCurrentProcess();
        return (heap, process.WorkingSet64);
    }

    private static async Task WatchAsync(PoseService.PoseServiceClient poses, Action<int> received, CancellationToken cancellationToken)
    {
        try
        {
            using var call = poses.WatchPoses(new WatchPosesRequest { SiteId = SiteId, MaxRatePerRobotHz = 2 }, cancellationToken: cancellationToken);
            while (await call.ResponseStream.MoveNext(cancellationToken))
            {
                received(call.ResponseStream.Current.Poses.Count);
            }
        }
        catch (Exception e) when (e is OperationCanceledException || (e is RpcException r && r.StatusCode == StatusCode.Cancelled))
        {
            // Stopped.
        }
    }

    /// <summary>Subscribers that read a few messages and hang up without ending the call cleanly.</summary>
    private static async Task ChurnAsync(PoseService.PoseServiceClient poses, double periodSeconds, Action dropped, CancellationToken cancellationToken)
    {
        try
        {
            while (!cancellationToken.IsCancellationRequested)
            {
                await Task.Delay(TimeSpan.FromSeconds(periodSeconds), cancellationToken);
                using var drop = CancellationTokenSource.CreateLinkedTokenSource(cancellationToken);
                using var call = poses.WatchPoses(new WatchPosesRequest { SiteId = SiteId }, cancellationToken: drop.Token);
                try
                {
                    for (var i = 0; i < 3 && await call.ResponseStream.MoveNext(drop.Token); i++)
                    {
                    }
                }
                finally
                {
                    await drop.CancelAsync();
                    dropped();
                }
            }
        }
        catch (Exception e) when (e is OperationCanceledException || (e is RpcException r && r.StatusCode == StatusCode.Cancelled))
        {
            // Stopped.
        }
    }
}
