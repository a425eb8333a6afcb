using Fleet.Contracts.V1;
using Fleet.Estimation.Anchors;
using Fleet.Estimation.Geometry;
using Fleet.Estimation.Measurements;
using Fleet.Grains.Health;
using Fleet.Server.Clients;
using Fleet.Simulation;
using Xunit.Abstractions;
using AnchorMap = Fleet.Estimation.Anchors.AnchorMap;
using EstimationAnchor = Fleet.Estimation.Anchors.Anchor;

namespace Fleet.Server.Tests;

/// <summary>Server with every robot pushing its anchor tallies after each batch, so flags follow the data exactly.</summary>
public sealed class AnchorHealthServer : IAsyncLifetime
{
    public ServerHarness Server { get; private set; } = null!;

    public async Task InitializeAsync() => Server = await ServerHarness.StartAsync(settings: new Dictionary<string, string?>
    {
        ["Fleet:Grains:TelemetryInterval"] = "00:00:00",
    });

    public async Task DisposeAsync()
    {
        await Server.DisposeAsync();
        KillRestartTests.TryDelete(Server.DataDirectory);
    }
}

/// <summary>
/// Anchor faults made in the simulator (Harbor Point DC, seeded), streamed through the real server: each is flagged
/// with the right reason within <see cref="AnchorHealthTracker.DetectionBoundSeconds"/> of data, and a healthy
/// constellation raises nothing.
/// </summary>
[Collection(AnchorHealthTests.AloneCollection)]
public sealed class AnchorHealthTests(AnchorHealthServer fixture, ITestOutputHelper output) : IClassFixture<AnchorHealthServer>
{
    /// <summary>
    /// Runs with no other server alive in the test process: OpenTelemetry listens to meters by name, so another
    /// in-process server's "Fleet" meter would share the flag gauge's stream (one server per process in production).
    /// </summary>
    public const string AloneCollection = "anchor health, no other server alive";

    private const string Layout = WarehouseSites.Tall;
    private const int Faulty = 4;

    public enum Fault
    {
        None,
        Moved,
        Silent,
        BehindRacks,
    }

    [Theory]
    [InlineData(Fault.None)]
    [InlineData(Fault.Moved)]
    [InlineData(Fault.Silent)]
    [InlineData(Fault.BehindRacks)]
    public async Task ListAnchorHealth_SimulatedFault_FlagsOnlyTheFaultyAnchorWithItsReason(Fault fault)
    {
        var site = "health-" + fault.ToString().ToLowerInvariant();
        // Without the hall's racks every anchor starts healthy: the only blocked paths are the ones a test adds.
        var truth = WarehouseSites.Build(Layout) with { Racks = [] };
        var serverMap = AnchorMap.Create(site, truth.Anchors.Anchors);
        var faultyId = truth.Anchors[Faulty].Id;
        var simulated = fault switch
        {
            // The anchor was knocked 0.5 m along x after the map was surveyed: the server still has the old position.
            Fault.Moved => truth with { Anchors = Replace(truth.Anchors, Faulty, a => new EstimationAnchor(a.Id, a.Position + new Vector3D(0.5, 0, 0), a.OrientationDegrees, a.AntennaDelayMetres)) },
            // Racks stacked right in front of and below the anchor: most paths to it go through shelving.
            Fault.BehindRacks => truth with { Racks = [.. truth.Racks, Shelving(truth.Anchors[Faulty].Position)] },
            _ => truth,
        };

        var generator = new MeasurementGenerator(new SimulationOptions
        {
            Seed = 7,
            Layout = Layout,
            RobotCount = 6,
            DurationSeconds = AnchorHealthTracker.DetectionBoundSeconds + 4,
        }, simulated);
        await SiteSetup.ApplyAsync(fixture.Server.Sites, site, serverMap, generator.Robots);

        await using (var stream = new ReconnectingIngestStream(fixture.Server.Ingest, maxUnacknowledged: 8))
        {
            var batcher = new MeasurementBatcher(site);
            var nextFlush = 0.1;
            ulong batchId = 0;
            foreach (var record in generator.Generate())
            {
                if (record is TdoaRecord tdoa)
                {
                    while (tdoa.Time >= nextFlush)
                    {
                        if (batcher.Count > 0)
                        {
                            await stream.SendAsync(batcher.TakeBatch(++batchId));
                        }

                        nextFlush += 0.1;
                    }

                    if (fault == Fault.Silent && (tdoa.AnchorA == faultyId || tdoa.AnchorB == faultyId))
                    {
                        continue;
                    }
                }

                batcher.Add(record);
            }

            await stream.SendAsync(batcher.TakeBatch(++batchId));
            await stream.FlushAsync().WaitAsync(TimeSpan.FromSeconds(120));
        }

        var health = (await fixture.Server.Sites.ListAnchorHealthAsync(new ListAnchorHealthRequest { SiteId = site }, deadline: DateTime.UtcNow.AddSeconds(30))).Anchors;
        foreach (var a in health)
        {
            output.WriteLine($"{a.AnchorId}: rate {a.MeasurementsPerSecond:F1}/s nis {a.MeanNormalizedResidual:F2} rej {a.RejectionRatio:P1} {string.Join("; ", a.Findings.Select(f => $"{f.Flag}: {f.Reason}"))}");
        }

        var flagged = health.Where(a => a.Findings.Count > 0).ToList();
        var expected = fault switch
        {
            Fault.Moved => AnchorHealthFlag.Displaced,
            Fault.Silent => AnchorHealthFlag.Silent,
            Fault.BehindRacks => AnchorHealthFlag.NlosProne,
            _ => AnchorHealthFlag.Unspecified,
        };
        if (expected == AnchorHealthFlag.Unspecified)
        {
            Assert.Empty(flagged);
            return;
        }

        // The expected anchor and reason are the fault injected into the simulator (its ground truth), not a tracker output.
        var only = Assert.Single(flagged);
        Assert.Equal(faultyId, only.AnchorId);
        var finding = Assert.Single(only.Findings);
        Assert.Equal(expected, finding.Flag);
        Assert.False(string.IsNullOrWhiteSpace(finding.Reason));

        // The same flag is exported as a gauge (polled: the Prometheus exporter caches a scrape briefly).
        var flagName = AnchorHealthTracker.FlagName((AnchorFlag)(int)expected);
        var deadline = DateTime.UtcNow.AddSeconds(30);
        while (true)
        {
            var metrics = await fixture.Server.ScrapeMetricsAsync();
            if (metrics.Split('\n').Any(line => line.StartsWith("fleet_anchor_flagged", StringComparison.Ordinal)
                && line.Contains($"fleet_site=\"{site}\"", StringComparison.Ordinal) && line.Contains($"fleet_anchor=\"{faultyId}\"", StringComparison.Ordinal)
                && line.Contains($"fleet_anchor_flag=\"{flagName}\"", StringComparison.Ordinal)))
            {
                break;
            }

            Assert.True(DateTime.UtcNow < deadline, $"no fleet_anchor_flagged series for {faultyId} ({flagName})");
            await Task.Delay(200);
        }
    }

    private static AnchorMap Replace(AnchorMap map, int index, Func<EstimationAnchor, EstimationAnchor> change) =>
        AnchorMap.Create(map.SiteId, map.Anchors.Select((a, i) => i == index ? change(a) : a));

    /// <summary>Shelving 4 m wide centred under the anchor, up to 0.3 m below it.</summary>
    private static AxisAlignedBox Shelving(Vector3D anchor) =>
        new(new Vector3D(anchor.X - 2, anchor.Y - 2, 0), new Vector3D(anchor.X + 2, anchor.Y + 2, anchor.Z - 0.3));
}

[CollectionDefinition(AnchorHealthTests.AloneCollection, DisableParallelization = true)]
public sealed class AnchorHealthAloneCollection;
