using Fleet.Contracts.V1;

namespace Fleet.Server.Tests;

/// <summary>One robot's garbage never reaches another robot or the site, and the robot recovers once good data returns.</summary>
public sealed class IsolationTests(SharedServer shared) : IClassFixture<SharedServer>
{
    private const string Site = "isolation";
    private static readonly (double X, double Y, double Z) Victim = (6.0, 4.0, 0.5);
    private static readonly (double X, double Y, double Z) Bystander = (14.0, 8.0, 0.5);

    private ServerHarness Server => shared.Server;

    [Fact]
    public async Task Ingest_OneRobotSendsGarbage_OtherRobotUnaffectedAndVictimRecovers()
    {
        await Server.Sites.CreateSiteAsync(new CreateSiteRequest { SiteId = Site }, deadline: Deadline());
        await Server.Sites.PutAnchorMapAsync(TestScenario.AnchorMapRequest(Site), deadline: Deadline());
        foreach (var robot in new[] { "victim", "bystander" })
        {
            // Tags 0.5 m above the reference point, as the static scenario places them.
            await Server.Sites.PutRobotAsync(new PutRobotRequest { SiteId = Site, RobotId = robot, TagOffset = new Vector3 { Z = 0.5 }, MotionModel = MotionModel.PlanarOdometry }, deadline: Deadline());
        }

        // Both robots tracked on good data.
        await SubmitAsync(TestScenario.StaticTagSamples("victim", Victim, 0, 100), TestScenario.StaticTagSamples("bystander", Bystander, 0, 100));

        // Garbage for the victim, interleaved with good data for the bystander, batch after batch.
        var garbageCount = 0;
        for (var round = 0; round < 5; round++)
        {
            var garbage = Garbage("victim", 100 + (round * 20));
            garbageCount += garbage.Tdoa.Count + garbage.Odometry.Count;
            var ack = await SubmitAsync(garbage, TestScenario.StaticTagSamples("bystander", Bystander, 100 + (round * 20), 20));
            Assert.True(ack.Rejected >= garbage.Tdoa.Count - 5, $"round {round}: only {ack.Rejected} rejected");
        }

        // Closed-form truth of the static tags (TestScenario): the bystander never moved off it.
        await AssertNearAsync("bystander", Bystander, 0.1);

        // Good data again: the victim is back on its true position.
        for (var round = 0; round < 10; round++)
        {
            await SubmitAsync(TestScenario.StaticTagSamples("victim", Victim, 300 + (round * 50), 50));
        }

        await AssertNearAsync("victim", Victim, 0.1);
        Assert.Equal(5 * 16, garbageCount);

        // The site still answers its admin calls and the site's other data is intact.
        var map = (await Server.Sites.GetAnchorMapAsync(new GetAnchorMapRequest { SiteId = Site }, deadline: Deadline())).AnchorMap;
        Assert.Equal(TestScenario.Anchors.Length, map.Anchors.Count);
    }

    /// <summary>Every kind of bad sample: non-finite and huge values, time backwards and far ahead, unknown and equal anchors.</summary>
    private static RobotSamples Garbage(string robot, int start)
    {
        var samples = new RobotSamples { RobotId = robot };
        var t = TestScenario.StartSeconds + (start * 0.02);
        void Add(double time, string a, string b, double value) =>
            samples.Tdoa.Add(new TdoaSample { SampleTime = TestScenario.Time(time), AnchorA = a, AnchorB = b, DistanceDifference = value });

        Add(t, "HP-A01", "HP-A02", double.NaN);
        Add(t, "HP-A01", "HP-A02", double.PositiveInfinity);
        Add(t, "HP-A01", "HP-A03", 1e300);
        Add(t, "HP-A01", "HP-A03", -4e6);
        Add(t, "HP-A01", "HP-A01", 0.0);
        Add(t, "NOPE-1", "HP-A02", 1.0);
        Add(t - 3600, "HP-A02", "HP-A03", 0.5);
        Add(t - 3600.5, "HP-A02", "HP-A04", 0.5);
        for (var k = 0; k < 6; k++)
        {
            // A clock glitch: a consistent run of stamps a day ahead, with values that fit nowhere.
            Add(t + 86_400 + (k * 0.02), "HP-A03", "HP-A05", 7.5 + k);
        }

        samples.Odometry.Add(new OdometrySample { SampleTime = TestScenario.Time(t), ForwardSpeed = double.NaN, YawRate = 0 });
        samples.Odometry.Add(new OdometrySample { SampleTime = TestScenario.Time(t), ForwardSpeed = 1e9, YawRate = 1e9 });
        return samples;
    }

    private async Task<BatchAck> SubmitAsync(params RobotSamples[] robots)
    {
        var batch = new MeasurementBatch { SiteId = Site };
        batch.Robots.Add(robots);
        return (await Server.Ingest.SubmitMeasurementsAsync(new SubmitMeasurementsRequest { Batch = batch }, deadline: Deadline())).Ack;
    }

    private async Task AssertNearAsync(string robot, (double X, double Y, double Z) truth, double metres)
    {
        var pose = (await Server.Poses.GetPoseAsync(new GetPoseRequest { SiteId = Site, RobotId = robot }, deadline: Deadline())).Pose;
        var error = Math.Sqrt(Math.Pow(pose.TagPosition.X - truth.X, 2) + Math.Pow(pose.TagPosition.Y - truth.Y, 2));
        Assert.True(error < metres, $"{robot} is {error:F3} m off its true position");
        Assert.All(pose.Covariance, v => Assert.True(double.IsFinite(v)));
    }

    private static DateTime Deadline() => DateTime.UtcNow.AddSeconds(30);
}
