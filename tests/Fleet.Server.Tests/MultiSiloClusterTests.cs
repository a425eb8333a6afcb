using Fleet.Estimation.Anchors;
using Fleet.Estimation.Filtering;
using Fleet.Estimation.Geometry;
using Fleet.Grains;
using Fleet.Grains.Registry;
using Fleet.Grains.Streaming;
using Fleet.Server.Cluster;
using Fleet.Server.Hosting;
using Fleet.Server.Registry;
using Microsoft.Extensions.Configuration;
using Microsoft.Extensions.DependencyInjection;
using Microsoft.Extensions.Options;
using Orleans.Configuration;
using Orleans.Hosting;
using Orleans.TestingHost;

namespace Fleet.Server.Tests;

/// <summary>
/// Two silos in one process (Orleans' TestCluster, in-memory membership) with the server's own grain services and the
/// cross-silo pose relay: robots spread over both, a subscriber on one silo sees every robot, and after the other
/// silo is killed its robots come back on the survivor from their stored last pose.
/// </summary>
public sealed class MultiSiloClusterTests
{
    private const string Site = "harbor-point";
    private const int RobotCount = 16;
    private static readonly TimeSpan Timeout = TimeSpan.FromSeconds(60);

    [Fact]
    public async Task TwoSilos_SubscriberOnOne_SeesRobotsOfBoth_AndKilledSilosRobotsResumeOnSurvivor()
    {
        var dataDirectory = ServerHarness.NewDataDirectory();
        using (var registry = new SqliteSiteRegistry(dataDirectory, TimeProvider.System))
        {
            registry.CreateSite(Site, "Harbor Point DC");
            registry.AddAnchorMap(Site, [.. TestScenario.Anchors.Select(a => new Anchor(a.Id, new Vector3D(a.X, a.Y, a.Z), Vector3D.Zero))]);
            for (var r = 0; r < RobotCount; r++)
            {
                // The tag rides at its spot's height (Spot: 1 m), which the server holds for registered robots.
                registry.PutRobot(Site, RobotId(r), new Vector3D(0, 0, Spot(r).Z), MotionModelKind.ConstantVelocity3D);
            }
        }

        var builder = new TestClusterBuilder(2);
        builder.Properties["FleetDataDirectory"] = dataDirectory;
        builder.AddSiloBuilderConfigurator<FleetSiloConfigurator>();
        var cluster = builder.Build();
        await cluster.DeployAsync();
        try
        {
            var primary = (InProcessSiloHandle)cluster.Primary!;
            var secondary = (InProcessSiloHandle)cluster.SecondarySilos[0];
            var primaryHub = primary.SiloHost.Services.GetRequiredService<PoseHub>();
            var secondaryHub = secondary.SiloHost.Services.GetRequiredService<PoseHub>();
            using var subscription = primaryHub.Subscribe(new PoseFilter { SiteId = Site }, 4096);

            // Arrange: every robot locked on its own spot (three batches of 20 noiseless TDOAs).
            var sampleIndex = new int[RobotCount];
            for (var round = 0; round < 3; round++)
            {
                await Task.WhenAll(Enumerable.Range(0, RobotCount).Select(r => IngestAsync(cluster.Client, r, sampleIndex, 20)));
            }

            var onSecondary = Enumerable.Range(0, RobotCount).Where(r => secondaryHub.Latest(Site, RobotId(r)) is not null).ToList();
            Assert.NotEmpty(onSecondary); // placement spread the robots (else the relay is not exercised)
            Assert.True(onSecondary.Count < RobotCount, "every robot landed on the secondary silo");

            // The primary's subscriber sees every robot, including those whose grains live on the secondary.
            var seen = await CollectAsync(subscription, RobotCount, Timeout);
            Assert.Equal(RobotCount, seen.Count);
            foreach (var (robot, pose) in seen)
            {
                // Closed form: the tag stands still at its spot (TestScenario), so the streamed pose must sit on it.
                var truth = Spot(int.Parse(robot.AsSpan(4), System.Globalization.CultureInfo.InvariantCulture));
                Assert.InRange(Distance(pose.TagPosition, truth), 0, 0.05);
            }

            // The site grain (one per cluster) knows robots of both silos: the fleet snapshot covers them all.
            var attached = await cluster.Client.GetGrain<ISiteGrain>(Site).GetAttachedRobots();
            Assert.Equal(RobotCount, attached.Length);

            // Every robot's last pose reached the shared registry before the kill.
            var store = primary.SiloHost.Services.GetRequiredService<IRobotPoseStore>();
            await PollAsync(() => Enumerable.Range(0, RobotCount).All(r => store.GetPose(Site, RobotId(r)) is not null), Timeout);

            // Act: kill the secondary (no graceful leave), then send every robot ONE batch of just two TDOAs.
            await cluster.KillSiloAsync(secondary);
            _ = subscription.Drain([], int.MaxValue);
            await PollAsync(async () =>
            {
                var results = await Task.WhenAll(Enumerable.Range(0, RobotCount).Select(async r =>
                {
                    try
                    {
                        await IngestAsync(cluster.Client, r, sampleIndex, 2);
                        return true;
                    }
                    catch (Exception e) when (SiloLossInterceptor.IsSiloLoss(e) || e is TimeoutException)
                    {
                        return false;
                    }
                }));
                return results.All(ok => ok);
            }, Timeout);

            // Assert: all robots publish again on the survivor. Two TDOAs cannot start a fresh track (multilateration
            // needs a burst), so the killed silo's robots publishing at once shows they resumed from their stored pose.
            var after = await CollectAsync(subscription, RobotCount, Timeout);
            Assert.Equal(RobotCount, after.Count);
            foreach (var r in onSecondary)
            {
                var pose = after[RobotId(r)];
                // Resumed, not re-acquiring: tracking, possibly UNCERTAIN while the grown uncertainty shrinks again.
                Assert.Contains(pose.State, new[] { RobotTrackState.Locked, RobotTrackState.Uncertain });
                Assert.InRange(Distance(pose.TagPosition, Spot(r)), 0, 0.25);
            }
        }
        finally
        {
            await cluster.StopAllSilosAsync();
            await cluster.DisposeAsync();
            DeleteDirectory(dataDirectory);
        }
    }

    private static void DeleteDirectory(string path)
    {
        try
        {
            Directory.Delete(path, recursive: true);
        }
        catch (IOException)
        {
            // Left for the OS to clean.
        }
    }

    private static string RobotId(int r) => $"amr-{r:D2}";

    /// <summary>Robot r's tag: a grid of spots inside the test hall, 1 m above the floor.</summary>
    private static (double X, double Y, double Z) Spot(int r) => (3.0 + (3.5 * (r % 4)), 2.0 + (2.5 * (r / 4)), 1.0);

    private static double Distance(Vec3 p, (double X, double Y, double Z) q) =>
        Math.Sqrt(((p.X - q.X) * (p.X - q.X)) + ((p.Y - q.Y) * (p.Y - q.Y)) + ((p.Z - q.Z) * (p.Z - q.Z)));

    private static Task<RobotBatchResult> IngestAsync(IClusterClient client, int robot, int[] sampleIndex, int count)
    {
        var pairs = TestScenario.Anchors.Length * (TestScenario.Anchors.Length - 1) / 2;
        var times = new double[count];
        var a = new string[count];
        var b = new string[count];
        var values = new double[count];
        for (var i = 0; i < count; i++)
        {
            var k = sampleIndex[robot] + i;
            var (ai, bi) = Pair(k % pairs);
            times[i] = TestScenario.StartSeconds + (k * 0.02);
            a[i] = TestScenario.Anchors[ai].Id;
            b[i] = TestScenario.Anchors[bi].Id;
            values[i] = TestScenario.DistanceDifference(ai, bi, Spot(robot));
        }

        sampleIndex[robot] += count;
        return client.GetGrain<IRobotGrain>(GrainKeys.Robot(Site, RobotId(robot)))
            .Ingest(new RobotBatch { TdoaTimes = times, AnchorA = a, AnchorB = b, DistanceDifferences = values, ReceivedTimestamp = System.Diagnostics.Stopwatch.GetTimestamp() });
    }

    private static (int A, int B) Pair(int index)
    {
        var n = TestScenario.Anchors.Length;
        for (var a = 0; a < n; a++)
        {
            for (var b = a + 1; b < n; b++)
            {
                if (index-- == 0)
                {
                    return (a, b);
                }
            }
        }

        throw new ArgumentOutOfRangeException(nameof(index));
    }

    private static async Task<Dictionary<string, PoseSnapshot>> CollectAsync(PoseSubscription subscription, int robots, TimeSpan timeout)
    {
        var seen = new Dictionary<string, PoseSnapshot>(StringComparer.Ordinal);
        using var cts = new CancellationTokenSource(timeout);
        var buffer = new List<PoseSnapshot>();
        while (seen.Count < robots && !cts.IsCancellationRequested)
        {
            buffer.Clear();
            subscription.Drain(buffer, int.MaxValue);
            foreach (var pose in buffer)
            {
                seen[pose.RobotId] = pose;
            }

            if (seen.Count < robots)
            {
                try
                {
                    await subscription.WaitAsync(TimeSpan.FromSeconds(1), cts.Token);
                }
                catch (OperationCanceledException)
                {
                    break;
                }
            }
        }

        return seen;
    }

    private static Task PollAsync(Func<bool> condition, TimeSpan timeout) => PollAsync(() => Task.FromResult(condition()), timeout);

    private static async Task PollAsync(Func<Task<bool>> condition, TimeSpan timeout)
    {
        var deadline = DateTime.UtcNow + timeout;
        while (!await condition())
        {
            Assert.True(DateTime.UtcNow < deadline, "condition not met within the timeout");
            await Task.Delay(100);
        }
    }

    /// <summary>Each test silo gets the server's grain services, the shared registry file and the pose relay.</summary>
    private sealed class FleetSiloConfigurator : ISiloConfigurator
    {
        public void Configure(ISiloBuilder siloBuilder)
        {
            var dataDirectory = siloBuilder.Configuration["FleetDataDirectory"]!;
            var configuration = new ConfigurationBuilder().AddInMemoryCollection(new Dictionary<string, string?>
            {
                ["Fleet:Grains:RobotHeartbeat"] = "00:00:05",
            }).Build();
            var options = new FleetServerOptions { DataDirectory = dataDirectory, MetricsPort = -1 };
            siloBuilder.Services.AddMetrics();
            siloBuilder.Services.AddSingleton(Options.Create(options));
            siloBuilder.Services.AddFleetCore(configuration, options);
            siloBuilder.Services.AddFleetPoseRelay(new FleetClusterOptions { RelayInterval = TimeSpan.FromMilliseconds(20), FeedRenewal = TimeSpan.FromSeconds(1) });
            siloBuilder.Configure<ClusterMembershipOptions>(o =>
            {
                o.ProbeTimeout = TimeSpan.FromSeconds(1);
                o.NumMissedProbesLimit = 2;
            });
        }
    }
}
