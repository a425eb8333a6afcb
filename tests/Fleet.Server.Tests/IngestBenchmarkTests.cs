using System.Text.Json;
using Fleet.Server.Benchmarking;

namespace Fleet.Server.Tests;

public sealed class IngestBenchmarkTests
{
    [Fact]
    public async Task RunAsync_TinyFleet_ReportsEveryFigureUnderItsJsonKey()
    {
        // A smoke run (speed itself is measured by `fleet bench ingest`, never asserted in tests).
        var result = await IngestBenchmark.RunAsync(new IngestBenchmarkOptions
        {
            Robots = 6,
            SimulatedTrajectories = 3,
            WarmupSeconds = 0.5,
            DurationSeconds = 0.5,
            PacedSeconds = 0.3,
            RobotsPerBatch = 3,
            Streams = 2,
            Rounds = 2,
            MinRounds = 1,
        }).WaitAsync(TimeSpan.FromMinutes(3));

        Assert.Equal(6, result.Robots);
        Assert.True(result.Measurements > 0);
        Assert.True(result.MeasurementsPerSecond > 0 && result.NoopMeasurementsPerSecond > 0);
        // Bytes per robot come from GC counters, which a collection during the run can drive to zero or below: only shape here.
        Assert.True(double.IsFinite(result.FilterBytesPerRobot));
        var json = JsonDocument.Parse(JsonSerializer.Serialize(result)).RootElement;
        foreach (var key in new[] { "measurements_per_s", "noop_measurements_per_s", "ratio_to_noop", "p50_latency_ms", "p99_latency_ms", "robots" })
        {
            Assert.True(json.TryGetProperty(key, out _), key);
        }
    }
}
