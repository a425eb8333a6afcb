using System.Text.Json;
using Fleet.Server.Benchmarking;

namespace Fleet.Server.Tests;

public sealed class ClusterBenchmarkTests
{
    [Fact]
    public void PrometheusTextSum_LinesOfTheTextFormat_AddsEveryLabelSetAndIgnoresTimestampsAndComments()
    {
        // Lines written to the grammar of Prometheus' text format 0.0.4 (prometheus.io/docs/instrumenting/exposition_formats):
        // "# HELP"/"# TYPE"/other comments, optional {labels} whose quoted values may hold spaces, braces, escaped quotes,
        // then the value (a Go float, +Inf/-Inf/NaN) and an optional integer timestamp.
        const string exposition = """
            # HELP requests_total Requests served.
            # TYPE requests_total counter
            requests_total{method="get",code="200"} 1027 1395066363000
            requests_total{method="get",code="500"}    3 1395066363000
            # a free comment naming requests_total 99
            heap_bytes{generation="gen 0 {young}",note="say \"hi\""} 1.5e3
            heap_bytes 500
            bare_gauge 12.47
            overflow{why="division by zero"} +Inf -3982045
            requests_total_created 17

            """;

        var sums = PrometheusText.Sum(exposition, ["requests_total", "heap_bytes", "bare_gauge", "overflow", "absent"]);

        Assert.Equal(1030, sums["requests_total"], 9);
        Assert.Equal(2000, sums["heap_bytes"], 9);
        Assert.Equal(12.47, sums["bare_gauge"], 9);
        Assert.True(double.IsPositiveInfinity(sums["overflow"]));
        Assert.False(sums.ContainsKey("absent"));
        Assert.False(sums.ContainsKey("requests_total_created"));
    }

    [Fact]
    public async Task RunAsync_OneInProcessServer_CountsEveryAcknowledgementAndScrapesTheSilo()
    {
        // A smoke run against one real server (throughput and memory are measured by `fleet bench cluster`, never asserted).
        await using var server = await ServerHarness.StartAsync(settings: new Dictionary<string, string?>
        {
            ["Fleet:Security:RateLimit:CallsPerSecond"] = "0",
            ["Fleet:Security:RateLimit:StreamMessagesPerSecond"] = "0",
        });
        var result = await ClusterBenchmark.RunAsync(new ClusterBenchmarkOptions
        {
            Servers = [FleetServerHost.GetGrpcAddress(server.App)],
            Metrics = [new Uri($"http://127.0.0.1:{server.Options.MetricsPort}/metrics")],
            Robots = 6,
            SimulatedTrajectories = 3,
            WarmupSeconds = 0.5,
            PacedSeconds = 0.5,
            SaturatedSeconds = 0.5,
            RobotsPerBatch = 3,
            Streams = 2,
        }).WaitAsync(TimeSpan.FromMinutes(3));

        Assert.Empty(result.Errors);
        Assert.True(result.Sent > 0);
        Assert.Equal(result.Sent, result.Acknowledged);
        Assert.Equal(0, result.Lost);
        var silo = Assert.Single(result.PerSilo);
        // Robots hosted are not asserted here: the test servers running in parallel share this process's meters, and
        // a stopped one's gauge can hide this one's. tests/outside/cluster_load.py checks them, one silo per process.
        // The System.Runtime meter is exported: CPU time and working set were scraped (heap growth may be any sign).
        Assert.True(silo.CpuSeconds >= 0 && silo.WorkingSetBytes > 0, $"cpu {silo.CpuSeconds}, working set {silo.WorkingSetBytes}");
        Assert.True(double.IsFinite(silo.HeapBytesAfter));

        // NaN (e.g. a heap gauge absent before the first collection) is written as the CLI writes it.
        var options = new JsonSerializerOptions { NumberHandling = System.Text.Json.Serialization.JsonNumberHandling.AllowNamedFloatingPointLiterals };
        var json = JsonDocument.Parse(JsonSerializer.Serialize(result, options)).RootElement;
        foreach (var key in new[] { "robots", "silos", "sent", "acknowledged", "lost", "paced_measurements_per_s", "saturated_measurements_per_s", "per_silo" })
        {
            Assert.True(json.TryGetProperty(key, out _), key);
        }

        foreach (var key in new[] { "robots_active", "heap_bytes_per_robot", "working_set_bytes", "cpu_seconds", "measurements_per_cpu_second" })
        {
            Assert.True(json.GetProperty("per_silo")[0].TryGetProperty(key, out _), key);
        }
    }
}
