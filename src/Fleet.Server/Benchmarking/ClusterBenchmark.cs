using System.Collections.Concurrent;
using System.Diagnostics;
using System.Text.Json.Serialization;
using Fleet.Contracts.V1;
using Fleet.Server.Clients;
using Fleet.Simulation;
using Grpc.Core;

namespace Fleet.Server.Benchmarking;

/// <summary>Settings of <see cref="ClusterBenchmark"/>.</summary>
public sealed record ClusterBenchmarkOptions
{
    /// <summary>gRPC address of each silo of one running cluster.</summary>
    public IReadOnlyList<Uri> Servers { get; init; } = [];

    /// <summary>Prometheus endpoint of each silo (e.g. http://127.0.0.1:9464/metrics), in the order of <see cref="Servers"/>.</summary>
    public IReadOnlyList<Uri> Metrics { get; init; } = [];

    /// <summary>Robots of the simulated fleet (each its own grain and filter somewhere in the cluster).</summary>
    public int Robots { get; init; } = 1000;

    /// <summary>Distinct simulated trajectories; robot k replays trajectory k mod this (generation cost stays small).</summary>
    public int SimulatedTrajectories { get; init; } = 50;

    /// <summary>Simulated seconds sent as fast as acknowledged first, so every robot is loaded and the JIT has run.</summary>
    public double WarmupSeconds { get; init; } = 2;

    /// <summary>Seconds sent in real time: the load is the fleet's own sample rate.</summary>
    public double PacedSeconds { get; init; } = 15;

    /// <summary>Simulated seconds sent as fast as the cluster acknowledges (per-silo CPU is measured over this phase).</summary>
    public double SaturatedSeconds { get; init; } = 6;

    /// <summary>TDOA rate per robot (odometry adds 20 Hz); 1,000 robots offer a little over 100,000 samples/s paced.</summary>
    public double TdoaRateHz { get; init; } = 100;

    /// <summary>Simulated time covered by one batch.</summary>
    public double BatchSeconds { get; init; } = 0.1;

    /// <summary>Robots per batch message (a gateway's share).</summary>
    public int RobotsPerBatch { get; init; } = 20;

    /// <summary>Gateway streams; stream i goes to server i mod the server count (at least one per server).</summary>
    public int Streams { get; init; } = 8;

    /// <summary>Unacknowledged batches a stream may have outstanding.</summary>
    public int MaxInFlightPerStream { get; init; } = 4;

    public int Seed { get; init; } = 1;

    public string Layout { get; init; } = WarehouseSites.Tall;

    public string SiteId { get; init; } = ClusterBenchmark.DefaultSiteId;

    /// <summary>Sent as x-api-key when the servers require credentials (an admin key: the run registers the site).</summary>
    public string? ApiKey { get; init; }

    /// <summary>PEM CA to trust for https servers.</summary>
    public string? CaFile { get; init; }
}

/// <summary>Figures of one silo. JSON names are the keys of `fleet bench cluster --json` under per_silo.</summary>
public sealed record ClusterSiloFigures
{
    [JsonPropertyName("server")]
    public string Server { get; init; } = "";

    [JsonPropertyName("metrics")]
    public string Metrics { get; init; } = "";

    /// <summary>Robot grains loaded on this silo after the run (its fleet_robots_active gauge).</summary>
    [JsonPropertyName("robots_active")]
    public long RobotsActive { get; init; }

    /// <summary>GC heap after the last collection (all generations), before any sample was sent.</summary>
    [JsonPropertyName("heap_bytes_before")]
    public double HeapBytesBefore { get; init; }

    [JsonPropertyName("heap_bytes_after")]
    public double HeapBytesAfter { get; init; }

    /// <summary>
    /// Heap growth over the run divided by the robots this silo hosts: grain, filter, caches, plus whatever the last
    /// collection left of in-flight batches (an upper bound; the server is not asked to collect).
    /// </summary>
    [JsonPropertyName("heap_bytes_per_robot")]
    public double HeapBytesPerRobot { get; init; }

    [JsonPropertyName("working_set_bytes")]
    public double WorkingSetBytes { get; init; }

    /// <summary>Process CPU time (user + system) of this silo during the saturated phase.</summary>
    [JsonPropertyName("cpu_seconds")]
    public double CpuSeconds { get; init; }

    /// <summary>Samples acknowledged through this silo's gateway streams in the saturated phase.</summary>
    [JsonPropertyName("saturated_measurements")]
    public long SaturatedMeasurements { get; init; }

    /// <summary>
    /// <see cref="SaturatedMeasurements"/> per CPU-second of this silo. Streams are spread evenly and robots placed at
    /// random, so each silo also filters robots fed through the other silos: this is the cluster's cost per sample.
    /// </summary>
    [JsonPropertyName("measurements_per_cpu_second")]
    public double MeasurementsPerCpuSecond { get; init; }
}

/// <summary>Figures of one run. JSON names are the keys `fleet bench cluster --json` reports.</summary>
public sealed record ClusterBenchmarkResult
{
    [JsonPropertyName("robots")]
    public int Robots { get; init; }

    [JsonPropertyName("silos")]
    public int Silos { get; init; }

    [JsonPropertyName("streams")]
    public int Streams { get; init; }

    /// <summary>Samples handed to the gateway streams over all phases.</summary>
    [JsonPropertyName("sent")]
    public long Sent { get; init; }

    /// <summary>Samples counted in acknowledgements (accepted + down-weighted + buffered + rejected).</summary>
    [JsonPropertyName("acknowledged")]
    public long Acknowledged { get; init; }

    /// <summary>Sent minus acknowledged: must be 0.</summary>
    [JsonPropertyName("lost")]
    public long Lost { get; init; }

    /// <summary>Streams that failed (e.g. UNAVAILABLE), one line each; a failed stream's unacknowledged samples are lost.</summary>
    [JsonPropertyName("errors")]
    public string[] Errors { get; init; } = [];

    [JsonPropertyName("rejected_fraction")]
    public double RejectedFraction { get; init; }

    /// <summary>Samples of the paced phase over its simulated length: the fleet's own rate.</summary>
    [JsonPropertyName("paced_offered_measurements_per_s")]
    public double PacedOfferedMeasurementsPerSecond { get; init; }

    /// <summary>Acknowledged samples of the paced phase over its wall time.</summary>
    [JsonPropertyName("paced_measurements_per_s")]
    public double PacedMeasurementsPerSecond { get; init; }

    /// <summary>Wall time of the paced phase; longer than <see cref="ClusterBenchmarkOptions.PacedSeconds"/> when the cluster fell behind.</summary>
    [JsonPropertyName("paced_wall_seconds")]
    public double PacedWallSeconds { get; init; }

    /// <summary>How far behind its due time the latest batch of the paced phase left (the cluster kept up when this stays near one batch round trip).</summary>
    [JsonPropertyName("paced_max_lag_ms")]
    public double PacedMaxLagMs { get; init; }

    [JsonPropertyName("saturated_measurements_per_s")]
    public double SaturatedMeasurementsPerSecond { get; init; }

    /// <summary>All silos' CPU time per acknowledged sample in the saturated phase (the client's own CPU not included).</summary>
    [JsonPropertyName("silo_cpu_us_per_measurement")]
    public double SiloCpuMicrosecondsPerMeasurement { get; init; }

    /// <summary>This client's CPU time in the saturated phase (it shares the machine with the silos when run locally).</summary>
    [JsonPropertyName("client_cpu_seconds")]
    public double ClientCpuSeconds { get; init; }

    [JsonPropertyName("per_silo")]
    public ClusterSiloFigures[] PerSilo { get; init; } = [];

    [JsonPropertyName("cores")]
    public int Cores { get; init; } = Environment.ProcessorCount;
}

/// <summary>
/// `fleet bench cluster`: drives silos that are already running as one cluster with a simulated fleet through real
/// gRPC gateway streams spread over all of them (stream i to server i mod n), so ingest enters every silo and robots
/// live on every silo. Phases: a saturated warm-up, a paced phase in real time (1,000 robots × (100 Hz TDOA + 20 Hz
/// odometry) offer a little over 100,000 samples/s), then a saturated phase. Every acknowledgement is counted against
/// what was sent. Each silo's Prometheus endpoint is scraped before and after for robots hosted, GC heap, working set
/// and process CPU time (the .NET System.Runtime meter).
/// </summary>
public static class ClusterBenchmark
{
    public const string DefaultSiteId = "bench-cluster";

    // Exported names of the server's own gauge and the System.Runtime meter, as scraped from a running server.
    internal const string RobotsActiveMetric = "fleet_robots_active";
    internal const string HeapMetric = "dotnet_gc_last_collection_heap_size_bytes";
    internal const string CpuMetric = "dotnet_process_cpu_time_seconds_total";
    internal const string WorkingSetMetric = "dotnet_process_memory_working_set_bytes";
    private static readonly string[] ScrapedMetrics = [RobotsActiveMetric, HeapMetric, CpuMetric, WorkingSetMetric];

    public static async Task<ClusterBenchmarkResult> RunAsync(ClusterBenchmarkOptions options, Action<string>? log = null, CancellationToken cancellationToken = default)
    {
        log ??= _ => { };
        if (options.Servers.Count == 0)
        {
            throw new ArgumentException("at least one server is needed", nameof(options));
        }

        if (options.Metrics.Count != options.Servers.Count)
        {
            throw new ArgumentException($"one metrics endpoint per server, in the same order ({options.Servers.Count} servers, {options.Metrics.Count} metrics endpoints)", nameof(options));
        }

        var silos = options.Servers.Count;
        var streamCount = Math.Max(options.Streams, silos);
        var total = options.WarmupSeconds + options.PacedSeconds + options.SaturatedSeconds;
        log($"simulating {options.SimulatedTrajectories} trajectories for {total:0.#} s");
        var generator = new MeasurementGenerator(new SimulationOptions
        {
            Seed = options.Seed,
            Layout = options.Layout,
            RobotCount = options.SimulatedTrajectories,
            DurationSeconds = total,
            TdoaRateHz = options.TdoaRateHz,
        });
        var plan = new BenchBatchPlan(generator, options.SiteId, options.Robots, options.BatchSeconds, options.RobotsPerBatch, streamCount);

        var connections = options.Servers.Select(s => new FleetClientConnection(s, options.ApiKey, options.CaFile)).ToArray();
        try
        {
            using var http = new HttpClient { Timeout = TimeSpan.FromSeconds(30) };
            var scraper = new SiloScraper(http, options.Metrics);
            // The site registry is shared by the cluster, so registering through one silo serves them all.
            log($"registering site {options.SiteId} and {options.Robots} robots through {options.Servers[0]}");
            await SiteSetup.ApplyAsync(new SiteService.SiteServiceClient(connections[0].CallInvoker), options.SiteId, generator.Layout.Anchors, plan.Robots, "benchmark", cancellationToken);
            var before = await scraper.ScrapeAsync(cancellationToken);
            if (before.Sum(s => s.GetValueOrDefault(RobotsActiveMetric)) > 0)
            {
                log("warning: robots were already loaded before the run; heap per robot then covers only the growth");
            }

            log($"warm-up: {options.WarmupSeconds:0.#} simulated s, saturated, {streamCount} streams over {silos} servers");
            var warmup = await SendAsync(connections, plan.Build(0, options.WarmupSeconds), options, paced: false, cancellationToken);

            var pacedBatches = plan.Build(options.WarmupSeconds, options.WarmupSeconds + options.PacedSeconds);
            var pacedSamples = BenchBatchPlan.SampleCount(pacedBatches);
            log($"paced: {options.PacedSeconds:0.#} s in real time, {pacedSamples / options.PacedSeconds:0} samples/s offered");
            var paced = await SendAsync(connections, pacedBatches, options, paced: true, cancellationToken);

            var saturatedStart = options.WarmupSeconds + options.PacedSeconds;
            var saturatedBatches = plan.Build(saturatedStart, saturatedStart + options.SaturatedSeconds);
            var middle = await scraper.ScrapeAsync(cancellationToken);
            log($"saturated: {options.SaturatedSeconds:0.#} simulated s as fast as acknowledged");
            using var self = Process.GetCurrentProcess();
            var clientCpuBefore = self.TotalProcessorTime;
            var saturated = await SendAsync(connections, saturatedBatches, options, paced: false, cancellationToken);
            self.Refresh();
            var clientCpu = (self.TotalProcessorTime - clientCpuBefore).TotalSeconds;
            var after = await scraper.ScrapeAsync(cancellationToken);

            PhaseFigures[] phases = [warmup, paced, saturated];
            var sent = phases.Sum(p => p.Sent.Sum());
            var acknowledged = phases.Sum(p => p.Acknowledged.Sum());
            var perSilo = Enumerable.Range(0, silos).Select(i =>
            {
                var robotsActive = (long)Math.Round(after[i].GetValueOrDefault(RobotsActiveMetric));
                var heapBefore = Get(before[i], HeapMetric);
                var heapAfter = Get(after[i], HeapMetric);
                var cpu = Get(after[i], CpuMetric) - Get(middle[i], CpuMetric);
                return new ClusterSiloFigures
                {
                    Server = options.Servers[i].ToString(),
                    Metrics = options.Metrics[i].ToString(),
                    RobotsActive = robotsActive,
                    HeapBytesBefore = heapBefore,
                    HeapBytesAfter = heapAfter,
                    HeapBytesPerRobot = robotsActive > 0 ? (heapAfter - heapBefore) / robotsActive : double.NaN,
                    WorkingSetBytes = Get(after[i], WorkingSetMetric),
                    CpuSeconds = cpu,
                    SaturatedMeasurements = saturated.Acknowledged[i],
                    MeasurementsPerCpuSecond = cpu > 0 ? saturated.Acknowledged[i] / cpu : double.NaN,
                };
            }).ToArray();
            var siloCpu = perSilo.Sum(s => s.CpuSeconds);
            return new ClusterBenchmarkResult
            {
                Robots = options.Robots,
                Silos = silos,
                Streams = streamCount,
                Sent = sent,
                Acknowledged = acknowledged,
                Lost = sent - acknowledged,
                Errors = [.. phases.SelectMany(p => p.Errors)],
                RejectedFraction = acknowledged > 0 ? phases.Sum(p => p.Rejected) / (double)acknowledged : double.NaN,
                PacedOfferedMeasurementsPerSecond = pacedSamples / options.PacedSeconds,
                PacedMeasurementsPerSecond = paced.Rate,
                PacedWallSeconds = paced.Seconds,
                PacedMaxLagMs = paced.MaxLagSeconds * 1000,
                SaturatedMeasurementsPerSecond = saturated.Rate,
                SiloCpuMicrosecondsPerMeasurement = saturated.Acknowledged.Sum() > 0 ? siloCpu * 1e6 / saturated.Acknowledged.Sum() : double.NaN,
                ClientCpuSeconds = clientCpu,
                PerSilo = perSilo,
            };
        }
        finally
        {
            foreach (var connection in connections)
            {
                connection.Dispose();
            }
        }
    }

    private static double Get(Dictionary<string, double> scrape, string name) => scrape.TryGetValue(name, out var value) ? value : double.NaN;

    /// <summary>Scrapes every silo's endpoint in turn, each scrape at least a second after the previous one.</summary>
    private sealed class SiloScraper(HttpClient http, IReadOnlyList<Uri> endpoints)
    {
        // The server's Prometheus exporter caches its response for 300 ms: a quicker second scrape would repeat the first.
        private static readonly TimeSpan MinimumSpacing = TimeSpan.FromSeconds(1);
        private long _last;

        public async Task<Dictionary<string, double>[]> ScrapeAsync(CancellationToken cancellationToken)
        {
            if (_last != 0 && Stopwatch.GetElapsedTime(_last) < MinimumSpacing)
            {
                await Task.Delay(MinimumSpacing - Stopwatch.GetElapsedTime(_last), cancellationToken);
            }

            var scrapes = new Dictionary<string, double>[endpoints.Count];
            for (var i = 0; i < endpoints.Count; i++)
            {
                string text;
                try
                {
                    text = await http.GetStringAsync(endpoints[i], cancellationToken);
                }
                catch (HttpRequestException e)
                {
                    throw new HttpRequestException($"metrics endpoint {endpoints[i]}: {e.Message}", e);
                }

                scrapes[i] = PrometheusText.Sum(text, ScrapedMetrics);
            }

            _last = Stopwatch.GetTimestamp();
            return scrapes;
        }
    }

    private sealed record PhaseFigures(long[] Sent, long[] Acknowledged, long Rejected, double Seconds, double MaxLagSeconds, string[] Errors)
    {
        public double Rate => Acknowledged.Sum() / Seconds;
    }

    /// <summary>
    /// Sends every stream's batches (stream i to server i mod n) with at most MaxInFlightPerStream unacknowledged, paced
    /// to each batch's offset or as fast as acknowledged. A stream that fails is reported with its status and stops:
    /// nothing is retried, so its unacknowledged samples show as lost.
    /// </summary>
    private static async Task<PhaseFigures> SendAsync(FleetClientConnection[] connections, List<TimedBatch>[] streams, ClusterBenchmarkOptions options, bool paced, CancellationToken cancellationToken)
    {
        var silos = connections.Length;
        var sent = new long[silos];
        var acknowledged = new long[silos];
        long rejected = 0;
        var errors = new ConcurrentQueue<string>();
        var maxLag = 0.0;
        var lagLock = new Lock();
        var started = Stopwatch.GetTimestamp();
        await Task.WhenAll(streams.Select((batches, s) => StreamAsync(s, batches)));
        var seconds = Stopwatch.GetElapsedTime(started).TotalSeconds;
        return new PhaseFigures(sent, acknowledged, rejected, seconds, maxLag, [.. errors]);

        async Task StreamAsync(int stream, List<TimedBatch> batches)
        {
            var silo = stream % silos;
            var client = new IngestService.IngestServiceClient(connections[silo].CallInvoker);
            using var stop = CancellationTokenSource.CreateLinkedTokenSource(cancellationToken);
            using var call = client.StreamMeasurements(cancellationToken: stop.Token);
            using var window = new SemaphoreSlim(options.MaxInFlightPerStream);
            var reader = Task.Run(async () =>
            {
                try
                {
                    while (await call.ResponseStream.MoveNext(stop.Token))
                    {
                        var ack = call.ResponseStream.Current.Ack;
                        if (ack is not null)
                        {
                            Interlocked.Add(ref acknowledged[silo], ack.Accepted + ack.DownWeighted + ack.Buffered + ack.Rejected);
                            Interlocked.Add(ref rejected, ack.Rejected);
                        }

                        window.Release();
                    }
                }
                finally
                {
                    // A response stream that ends or fails early must not leave the writer waiting for acknowledgements.
                    stop.Cancel();
                }
            }, CancellationToken.None);

            Exception? writeFailure = null;
            try
            {
                foreach (var (batch, offset) in batches)
                {
                    if (paced)
                    {
                        var due = TimeSpan.FromSeconds(offset) - Stopwatch.GetElapsedTime(started);
                        if (due > TimeSpan.Zero)
                        {
                            await Task.Delay(due, stop.Token);
                        }
                    }

                    await window.WaitAsync(stop.Token);
                    var lag = Stopwatch.GetElapsedTime(started).TotalSeconds - offset;
                    lock (lagLock)
                    {
                        maxLag = Math.Max(maxLag, lag);
                    }

                    Interlocked.Add(ref sent[silo], BenchBatchPlan.SampleCount(batch));
                    await call.RequestStream.WriteAsync(new StreamMeasurementsRequest { Batch = batch }, stop.Token);
                }

                await call.RequestStream.CompleteAsync();
            }
            catch (Exception e) when (!cancellationToken.IsCancellationRequested && e is RpcException or OperationCanceledException or IOException or InvalidOperationException)
            {
                writeFailure = e;
                stop.Cancel();
            }

            Exception? readFailure = null;
            try
            {
                await reader;
            }
            catch (Exception e) when (!cancellationToken.IsCancellationRequested && e is RpcException or OperationCanceledException or IOException)
            {
                readFailure = e;
            }

            var failure = Describe(readFailure, writeFailure, missingAcknowledgements: window.CurrentCount < options.MaxInFlightPerStream);
            if (failure is not null)
            {
                errors.Enqueue($"stream {stream} to {options.Servers[silo]}: {failure}");
            }
        }
    }

    /// <summary>What ended a stream early, or null when it finished with every batch acknowledged.</summary>
    private static string? Describe(Exception? read, Exception? write, bool missingAcknowledgements)
    {
        // The server's status (e.g. UNAVAILABLE) arrives on the response stream; the writer then often sees only our
        // own cancellation, and the reader sees CANCELLED when the writer failed first.
        if (read is RpcException r && !(r.StatusCode == StatusCode.Cancelled && write is RpcException))
        {
            return $"{r.StatusCode}: {r.Status.Detail}";
        }

        if (write is RpcException w)
        {
            return $"{w.StatusCode}: {w.Status.Detail}";
        }

        if (write is not null and not OperationCanceledException)
        {
            return $"{write.GetType().Name}: {write.Message}";
        }

        if (read is not null)
        {
            return $"{read.GetType().Name}: {read.Message}";
        }

        if (write is not null)
        {
            return "the server ended the stream before every batch was sent";
        }

        return missingAcknowledgements ? "the server ended the stream before acknowledging every batch" : null;
    }
}
