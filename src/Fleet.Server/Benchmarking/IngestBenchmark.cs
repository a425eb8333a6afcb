using System.Collections.Concurrent;
using System.Diagnostics;
using System.Diagnostics.Metrics;
using System.Text.Json.Serialization;
using Fleet.Contracts.V1;
using Fleet.Estimation.Filtering;
using Fleet.Estimation.Measurements;
using Fleet.Grains.Telemetry;
using Fleet.Server.Clients;
using Fleet.Simulation;
using Grpc.Net.Client;
using Microsoft.AspNetCore.Builder;
using Microsoft.Extensions.Configuration;

namespace Fleet.Server.Benchmarking;

/// <summary>Settings of <see cref="IngestBenchmark"/>.</summary>
public sealed record IngestBenchmarkOptions
{
    /// <summary>Robots the server tracks (each its own grain and filter).</summary>
    public int Robots { get; init; } = 1000;

    /// <summary>Distinct simulated trajectories; robot k replays trajectory k mod this (generation cost stays small).</summary>
    public int SimulatedTrajectories { get; init; } = 50;

    /// <summary>Simulated seconds sent as fast as the server acknowledges, per throughput round.</summary>
    public double DurationSeconds { get; init; } = 6;

    /// <summary>
    /// Most throughput rounds, alternating between the filtering and the no-op server; each server's best round is
    /// reported. Rounds stop earlier, after <see cref="MinRounds"/>, once the filtering server's rate has settled.
    /// </summary>
    public int Rounds { get; init; } = 10;

    public int MinRounds { get; init; } = 3;

    public double WarmupSeconds { get; init; } = 1;

    /// <summary>Simulated seconds sent in real time (latency phase: the load is the fleet's own sample rate).</summary>
    public double PacedSeconds { get; init; } = 4;

    /// <summary>
    /// TDOA rate per robot (odometry adds 20 Hz). With dropouts and out-of-range anchors the simulator delivers fewer
    /// than nominal; 100 Hz × 1,000 robots offers a little over 100,000 samples/s in the paced phase.
    /// </summary>
    public double TdoaRateHz { get; init; } = 100;

    /// <summary>Simulated time covered by one batch.</summary>
    public double BatchSeconds { get; init; } = 0.1;

    /// <summary>Robots per batch message (a gateway's share).</summary>
    public int RobotsPerBatch { get; init; } = 20;

    /// <summary>Concurrent gateway streams.</summary>
    public int Streams { get; init; } = 8;

    /// <summary>Unacknowledged batches a stream may have outstanding.</summary>
    public int MaxInFlightPerStream { get; init; } = 4;

    public int Seed { get; init; } = 1;

    public string Layout { get; init; } = WarehouseSites.Tall;
}

/// <summary>Figures of one run. JSON names are the keys `fleet bench ingest --json` reports.</summary>
public sealed record IngestBenchmarkResult
{
    [JsonPropertyName("robots")]
    public int Robots { get; init; }

    [JsonPropertyName("measurements")]
    public long Measurements { get; init; }

    [JsonPropertyName("measurements_per_s")]
    public double MeasurementsPerSecond { get; init; }

    [JsonPropertyName("noop_measurements_per_s")]
    public double NoopMeasurementsPerSecond { get; init; }

    [JsonPropertyName("ratio_to_noop")]
    public double RatioToNoop { get; init; }

    /// <summary>Throughput of the filtering server in each round, in order (the first includes the JIT's tier-up).</summary>
    [JsonPropertyName("round_measurements_per_s")]
    public double[] RoundMeasurementsPerSecond { get; init; } = [];

    [JsonPropertyName("round_noop_measurements_per_s")]
    public double[] RoundNoopMeasurementsPerSecond { get; init; } = [];

    /// <summary>Achieved rate in the paced phase, where robots send in real time.</summary>
    [JsonPropertyName("paced_measurements_per_s")]
    public double PacedMeasurementsPerSecond { get; init; }

    /// <summary>Server-side time from receiving a batch to publishing each robot's pose (ms), paced phase.</summary>
    [JsonPropertyName("p50_latency_ms")]
    public double P50LatencyMs { get; init; }

    [JsonPropertyName("p99_latency_ms")]
    public double P99LatencyMs { get; init; }

    /// <summary>The same latency while sending as fast as possible (queueing at saturation included).</summary>
    [JsonPropertyName("saturated_p50_latency_ms")]
    public double SaturatedP50LatencyMs { get; init; }

    [JsonPropertyName("saturated_p99_latency_ms")]
    public double SaturatedP99LatencyMs { get; init; }

    /// <summary>Client-observed batch round trip (send → acknowledgement), ms.</summary>
    [JsonPropertyName("ack_p50_ms")]
    public double AckP50Ms { get; init; }

    [JsonPropertyName("ack_p99_ms")]
    public double AckP99Ms { get; init; }

    [JsonPropertyName("rejected_fraction")]
    public double RejectedFraction { get; init; }

    /// <summary>Managed heap growth per robot once every robot is loaded (grain, filter, caches; an upper bound).</summary>
    [JsonPropertyName("heap_bytes_per_robot")]
    public double HeapBytesPerRobot { get; init; }

    /// <summary>Managed bytes of one robot's filter state alone (RobotFilter + its pose buffer), measured directly.</summary>
    [JsonPropertyName("filter_bytes_per_robot")]
    public double FilterBytesPerRobot { get; init; }

    /// <summary>Process CPU time per measurement in the timed phase (client and server together; robust to other load).</summary>
    [JsonPropertyName("cpu_us_per_measurement")]
    public double CpuMicrosecondsPerMeasurement { get; init; }

    [JsonPropertyName("noop_cpu_us_per_measurement")]
    public double NoopCpuMicrosecondsPerMeasurement { get; init; }

    [JsonPropertyName("streams")]
    public int Streams { get; init; }

    [JsonPropertyName("rounds")]
    public int Rounds { get; init; }

    [JsonPropertyName("cores")]
    public int Cores { get; init; } = Environment.ProcessorCount;
}

/// <summary>
/// `fleet bench ingest`: a real server and a real gRPC client on loopback in one process, beside a second server whose
/// ingest acknowledges without filtering (the transport's own cost). Simulated robots are registered and warmed up;
/// then throughput rounds stream samples as fast as each server acknowledges them, alternating between the two servers
/// with the same client and batches, and the ratio of their best rounds is reported; finally a paced phase sends every
/// robot's samples in real time, which at the default 1,000 robots × (100 + 20) Hz offers a little over 100,000
/// samples/s, for the ingest-to-publish latency at that load. Latency is read from the server's own histogram through
/// a MeterListener.
/// </summary>
public static class IngestBenchmark
{
    public const string SiteId = "bench-site";

    public static async Task<IngestBenchmarkResult> RunAsync(IngestBenchmarkOptions options, Action<string>? log = null, CancellationToken cancellationToken = default)
    {
        log ??= _ => { };
        var rounds = Math.Max(1, options.Rounds);
        var minRounds = Math.Clamp(options.MinRounds, 1, rounds);
        var total = options.WarmupSeconds + (rounds * options.DurationSeconds) + options.PacedSeconds;
        log($"simulating {options.SimulatedTrajectories} trajectories for {total:0.#} s");
        var sim = new SimulationOptions
        {
            Seed = options.Seed,
            Layout = options.Layout,
            RobotCount = options.SimulatedTrajectories,
            DurationSeconds = total,
            TdoaRateHz = options.TdoaRateHz,
        };
        var generator = new MeasurementGenerator(sim);
        var plan = new BenchBatchPlan(generator, SiteId, options.Robots, options.BatchSeconds, options.RobotsPerBatch, options.Streams);
        var robots = plan.Robots;

        // Phases in simulated time: warm-up, one throughput phase per round (the filtering server never sees a sample
        // twice, so none is refused as too late), then the paced phase. Each is sliced into batches when it is due.
        var warmup = plan.Build(0, options.WarmupSeconds);
        List<TimedBatch>[] Round(int r) => plan.Build(options.WarmupSeconds + (r * options.DurationSeconds), options.WarmupSeconds + ((r + 1) * options.DurationSeconds));
        log($"{minRounds}–{rounds} throughput rounds, {options.Streams} streams");

        var filterBytes = MeasureFilterBytes(generator.Layout.Anchors, robots[0]);

        // Both servers run side by side in this process and the throughput rounds alternate between them, so a burst
        // of outside load or the JIT's tier-up in the first round cannot favour one. Each server's best round counts.
        var latencies = new ConcurrentQueue<double>();
        using var listener = ListenToLatency(latencies);
        await using var server = await StartAsync(noop: false, cancellationToken);
        await using var noop = await StartAsync(noop: true, cancellationToken);
        using var channel = GrpcChannel.ForAddress(FleetServerHost.GetGrpcAddress(server));
        using var noopChannel = GrpcChannel.ForAddress(FleetServerHost.GetGrpcAddress(noop));
        await SiteSetup.ApplyAsync(new SiteService.SiteServiceClient(channel), SiteId, generator.Layout.Anchors, robots, "benchmark", cancellationToken);

        var heapBefore = HeapBytes();
        await SendAsync(channel, warmup, options, paced: false, cancellationToken);
        var heapAfter = HeapBytes();
        await SendAsync(noopChannel, warmup, options, paced: false, cancellationToken);

        RunFigures? best = null, bestNoop = null;
        double[] bestLatency = [];
        var realRates = new List<double>();
        var noopRates = new List<double>();
        var roundsWithoutGain = 0;
        for (var r = 0; r < rounds; r++)
        {
            // The JIT keeps promoting hot code for many seconds under this load: rounds go on until the filtering
            // server's best stops improving (steady state), at least MinRounds and at most Rounds.
            if (r >= minRounds && roundsWithoutGain >= 2)
            {
                break;
            }

            var batches = Round(r);
            log($"throughput round {r + 1} ({BenchBatchPlan.SampleCount(batches)} samples): filtering server, then no-op server");
            latencies.Clear();
            var run = await SendAsync(channel, batches, options, paced: false, cancellationToken);
            var latency = Drain(latencies);
            realRates.Add(run.Rate);
            roundsWithoutGain = best is null || run.Rate > best.Rate * 1.03 ? 0 : roundsWithoutGain + 1;
            if (best is null || run.Rate > best.Rate)
            {
                (best, bestLatency) = (run, latency);
            }

            var noopRun = await SendAsync(noopChannel, batches, options, paced: false, cancellationToken);
            noopRates.Add(noopRun.Rate);
            if (bestNoop is null || noopRun.Rate > bestNoop.Rate)
            {
                bestNoop = noopRun;
            }
        }

        log("paced phase: filtering server");
        var pacedStart = options.WarmupSeconds + (realRates.Count * options.DurationSeconds);
        var paced = plan.Build(pacedStart, pacedStart + options.PacedSeconds);
        latencies.Clear();
        var pacedRun = await SendAsync(channel, paced, options, paced: true, cancellationToken);
        var pacedLatency = Drain(latencies);
        await server.StopAsync(cancellationToken);
        await noop.StopAsync(cancellationToken);

        return new IngestBenchmarkResult
        {
            Robots = options.Robots,
            Streams = options.Streams,
            Rounds = realRates.Count,
            Measurements = best!.Samples,
            MeasurementsPerSecond = best.Rate,
            NoopMeasurementsPerSecond = bestNoop!.Rate,
            RatioToNoop = best.Rate / bestNoop.Rate,
            RoundMeasurementsPerSecond = [.. realRates],
            RoundNoopMeasurementsPerSecond = [.. noopRates],
            PacedMeasurementsPerSecond = pacedRun.Rate,
            P50LatencyMs = Percentile(pacedLatency, 0.50),
            P99LatencyMs = Percentile(pacedLatency, 0.99),
            SaturatedP50LatencyMs = Percentile(bestLatency, 0.50),
            SaturatedP99LatencyMs = Percentile(bestLatency, 0.99),
            AckP50Ms = Percentile(best.AckMs, 0.50),
            AckP99Ms = Percentile(best.AckMs, 0.99),
            RejectedFraction = best.Samples > 0 ? (double)best.Rejected / best.Samples : 0,
            HeapBytesPerRobot = (heapAfter - heapBefore) / (double)options.Robots,
            FilterBytesPerRobot = filterBytes,
            CpuMicrosecondsPerMeasurement = best.CpuMicrosecondsPerSample,
            NoopCpuMicrosecondsPerMeasurement = bestNoop.CpuMicrosecondsPerSample,
        };
    }

    private static double[] Drain(ConcurrentQueue<double> seconds)
    {
        var ms = new List<double>(seconds.Count);
        while (seconds.TryDequeue(out var s))
        {
            ms.Add(s * 1000);
        }

        ms.Sort();
        return [.. ms];
    }

    private sealed record RunFigures(long Samples, long Rejected, double Seconds, double[] AckMs, double CpuMicroseconds)
    {
        public double CpuMicrosecondsPerSample => Samples > 0 ? CpuMicroseconds / Samples : double.NaN;

        public double Rate => Samples / Seconds;
    }

    private static async Task<RunFigures> SendAsync(GrpcChannel channel, List<TimedBatch>[] streams, IngestBenchmarkOptions options, bool paced, CancellationToken cancellationToken)
    {
        var client = new IngestService.IngestServiceClient(channel);
        var acks = new ConcurrentQueue<double>();
        long samples = 0, rejected = 0;
        var cpuBefore = Process.GetCurrentProcess().TotalProcessorTime;
        var started = Stopwatch.GetTimestamp();
        await Task.WhenAll(streams.Select(async batches =>
        {
            using var call = client.StreamMeasurements(cancellationToken: cancellationToken);
            using var window = new SemaphoreSlim(options.MaxInFlightPerStream);
            var sentAt = new ConcurrentDictionary<ulong, long>();
            var reader = Task.Run(async () =>
            {
                while (await call.ResponseStream.MoveNext(cancellationToken))
                {
                    var ack = call.ResponseStream.Current.Ack;
                    if (sentAt.TryRemove(ack.BatchId, out var t0))
                    {
                        acks.Enqueue(Stopwatch.GetElapsedTime(t0).TotalMilliseconds);
                    }

                    Interlocked.Add(ref samples, ack.Accepted + ack.DownWeighted + ack.Buffered + ack.Rejected);
                    Interlocked.Add(ref rejected, ack.Rejected);
                    window.Release();
                }
            }, cancellationToken);
            foreach (var (batch, offset) in batches)
            {
                if (paced)
                {
                    var due = TimeSpan.FromSeconds(offset) - Stopwatch.GetElapsedTime(started);
                    if (due > TimeSpan.Zero)
                    {
                        await Task.Delay(due, cancellationToken);
                    }
                }

                await window.WaitAsync(cancellationToken);
                sentAt[batch.BatchId] = Stopwatch.GetTimestamp();
                await call.RequestStream.WriteAsync(new StreamMeasurementsRequest { Batch = batch }, cancellationToken);
            }

            await call.RequestStream.CompleteAsync();
            await reader;
        }));
        var seconds = Stopwatch.GetElapsedTime(started).TotalSeconds;
        var cpu = (Process.GetCurrentProcess().TotalProcessorTime - cpuBefore).TotalMicroseconds;
        return new RunFigures(samples, rejected, seconds, acks.Order().ToArray(), cpu);
    }

    private static async Task<WebApplication> StartAsync(bool noop, CancellationToken cancellationToken)
    {
        var dataDirectory = Path.Combine(Path.GetTempPath(), "fleet-bench", Guid.NewGuid().ToString("N"));
        var settings = new Dictionary<string, string?>
        {
            ["Fleet:Server:DataDirectory"] = dataDirectory,
            ["Fleet:Server:ListenAddress"] = "127.0.0.1",
            ["Fleet:Server:GrpcPort"] = "0",
            ["Fleet:Server:MetricsPort"] = "-1",
            ["Fleet:LiveView:Enabled"] = "false",
            ["Fleet:Server:SiloPort"] = "0",
            ["Fleet:Server:GatewayPort"] = "0",
            ["Fleet:Server:NoopIngest"] = noop ? "true" : "false",
            // Loopback only, one client: no credentials, and no rate limit in the way of the measured throughput.
            ["Fleet:Security:AllowAnonymous"] = "true",
            ["Fleet:Security:RateLimit:CallsPerSecond"] = "0",
            ["Fleet:Security:RateLimit:StreamMessagesPerSecond"] = "0",
            ["Logging:LogLevel:Default"] = "Warning",

            // Under full load the silo watchdog reports CPU starvation, which is the point of the exercise.
            ["Logging:LogLevel:Orleans.Runtime.Watchdog"] = "Error",
        };
        return await FleetServerHost.StartAsync([], builder => builder.Configuration.AddInMemoryCollection(settings), cancellationToken: cancellationToken);
    }

    private static MeterListener ListenToLatency(ConcurrentQueue<double> into)
    {
        var listener = new MeterListener
        {
            InstrumentPublished = (instrument, l) =>
            {
                if (instrument.Meter.Name == FleetInstrumentNames.MeterName && instrument.Name == FleetInstrumentNames.IngestLatency)
                {
                    l.EnableMeasurementEvents(instrument);
                }
            },
        };
        listener.SetMeasurementEventCallback<double>((_, value, _, _) => into.Enqueue(value));
        listener.Start();
        return listener;
    }

    private static double MeasureFilterBytes(Estimation.Anchors.AnchorMap map, RobotRecord robot)
    {
        const int count = 1000;
        var options = new FilterOptions { Motion = robot.Motion, TagLeverArm = robot.TagOffset };
        var keep = new object[count];
        var before = HeapBytes();
        for (var i = 0; i < count; i++)
        {
            keep[i] = (new RobotFilter(map, options), new PoseEstimate());
        }

        var after = HeapBytes();
        GC.KeepAlive(keep);
        return (after - before) / (double)count;
    }

    private static long HeapBytes()
    {
        GC.Collect();
        GC.WaitForPendingFinalizers();
        GC.Collect();
        return GC.GetTotalMemory(forceFullCollection: true);
    }

    private static double Percentile(double[] sorted, double p) =>
        sorted.Length == 0 ? double.NaN : sorted[Math.Clamp((int)Math.Ceiling(p * sorted.Length) - 1, 0, sorted.Length - 1)];
}
