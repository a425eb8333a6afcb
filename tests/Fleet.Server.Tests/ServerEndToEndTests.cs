using Fleet.Contracts.V1;
using Fleet.Grains.Registry;
using Google.Rpc;
using Grpc.Core;
using Grpc.Health.V1;
using Microsoft.Extensions.DependencyInjection;

namespace Fleet.Server.Tests;

/// <summary>
/// Drives a real server over a real gRPC channel: sites, anchor maps, ingest, latest pose, pose stream, snapshot,
/// health, error details and metrics.
/// </summary>
public sealed class ServerEndToEndTests(SharedServer shared) : IClassFixture<SharedServer>
{
    private static readonly TimeSpan Timeout = TimeSpan.FromSeconds(30);

    // A tag standing still inside the hall (invented position).
    private static readonly (double X, double Y, double Z) TagPosition = (7.3, 4.1, 0.5);

    private ServerHarness Server => shared.Server;

    [Fact]
    public async Task Check_OverallLivenessReadiness_ReturnServing()
    {
        // Standard gRPC health checking protocol (grpc.health.v1).
        var health = new Health.HealthClient(Server.Channel);
        foreach (var service in new[] { string.Empty, "liveness", "readiness" })
        {
            var response = await health.CheckAsync(new HealthCheckRequest { Service = service }, deadline: Deadline());
            Assert.Equal(HealthCheckResponse.Types.ServingStatus.Serving, response.Status);
        }
    }

    [Fact]
    public async Task CreateSite_ThenListSites_ContainsSite()
    {
        await Server.Sites.CreateSiteAsync(new CreateSiteRequest { SiteId = "list-me", DisplayName = "Harbor Point DC" }, deadline: Deadline());
        var list = await Server.Sites.ListSitesAsync(new ListSitesRequest(), deadline: Deadline());
        Assert.Contains(list.Sites, s => s.SiteId == "list-me" && s.DisplayName == "Harbor Point DC");

        var again = await Assert.ThrowsAsync<RpcException>(() =>
            Server.Sites.CreateSiteAsync(new CreateSiteRequest { SiteId = "list-me" }, deadline: Deadline()).ResponseAsync);
        Assert.Equal(StatusCode.AlreadyExists, again.StatusCode);
    }

    [Fact]
    public async Task ListSites_SmallPages_WalksEverySiteOnce()
    {
        for (var i = 0; i < 5; i++)
        {
            await Server.Sites.CreateSiteAsync(new CreateSiteRequest { SiteId = $"page-{i}" }, deadline: Deadline());
        }

        var seen = new List<string>();
        var token = string.Empty;
        do
        {
            var page = await Server.Sites.ListSitesAsync(new ListSitesRequest { PageSize = 2, PageToken = token }, deadline: Deadline());
            Assert.True(page.Sites.Count <= 2);
            seen.AddRange(page.Sites.Select(s => s.SiteId));
            token = page.NextPageToken;
        }
        while (token.Length > 0);

        Assert.Equal(seen.Distinct().Count(), seen.Count);
        Assert.Equal(["page-0", "page-1", "page-2", "page-3", "page-4"], seen.Where(s => s.StartsWith("page-", StringComparison.Ordinal)));
    }

    [Fact]
    public async Task PutAnchorMap_CoincidentAnchorsAndBadSiteId_ReturnsInvalidArgumentWithFieldViolations()
    {
        await Server.Sites.CreateSiteAsync(new CreateSiteRequest { SiteId = "bad-map" }, deadline: Deadline());
        var request = TestScenario.AnchorMapRequest("bad-map");
        request.Anchors[1].Position = request.Anchors[0].Position.Clone();

        var e = await Assert.ThrowsAsync<RpcException>(() => Server.Sites.PutAnchorMapAsync(request, deadline: Deadline()).ResponseAsync);
        Assert.Equal(StatusCode.InvalidArgument, e.StatusCode);
        var badRequest = e.GetRpcStatus()?.GetDetail<BadRequest>();
        Assert.NotNull(badRequest);
        Assert.Contains(badRequest.FieldViolations, v => v.Field.StartsWith("anchors[", StringComparison.Ordinal));

        var badId = await Assert.ThrowsAsync<RpcException>(() =>
            Server.Sites.CreateSiteAsync(new CreateSiteRequest { SiteId = "Not A Valid Id" }, deadline: Deadline()).ResponseAsync);
        Assert.Equal(StatusCode.InvalidArgument, badId.StatusCode);
        Assert.Contains(badId.GetRpcStatus()!.GetDetail<BadRequest>()!.FieldViolations, v => v.Field == "site_id");
    }

    [Fact]
    public async Task SubmitMeasurements_UnknownSite_ReturnsNotFound()
    {
        var request = new SubmitMeasurementsRequest { Batch = new MeasurementBatch { SiteId = "no-such-site" } };
        var e = await Assert.ThrowsAsync<RpcException>(() => Server.Ingest.SubmitMeasurementsAsync(request, deadline: Deadline()).ResponseAsync);
        Assert.Equal(StatusCode.NotFound, e.StatusCode);
    }

    [Fact]
    public async Task StreamMeasurements_UnknownAnchorAndUnknownSite_AcksEachBatchWithReasons()
    {
        await CreateSiteWithMapAsync("stream-acks");
        using var call = Server.Ingest.StreamMeasurements(deadline: Deadline());

        var batch = new MeasurementBatch { SiteId = "stream-acks", BatchId = 7 };
        var samples = TestScenario.StaticTagSamples("tug-01", TagPosition, 0, 3);
        samples.Tdoa[1].AnchorB = "HP-Z99";
        batch.Robots.Add(samples);
        await call.RequestStream.WriteAsync(new StreamMeasurementsRequest { Batch = batch });
        Assert.True(await call.ResponseStream.MoveNext());
        var ack = call.ResponseStream.Current.Ack;
        Assert.Equal(7UL, ack.BatchId);
        Assert.Equal(3U, ack.Accepted + ack.DownWeighted + ack.Buffered + ack.Rejected);
        Assert.Contains(ack.Rejections, r => r.RobotId == "tug-01" && r.Index == 1 && r.Kind == SampleKind.Tdoa && r.Reason == RejectionReason.UnknownAnchor);

        var unknown = new MeasurementBatch { SiteId = "nowhere", BatchId = 8 };
        unknown.Robots.Add(TestScenario.StaticTagSamples("tug-01", TagPosition, 0, 4));
        await call.RequestStream.WriteAsync(new StreamMeasurementsRequest { Batch = unknown });
        Assert.True(await call.ResponseStream.MoveNext());
        var rejected = call.ResponseStream.Current.Ack;
        Assert.Equal(8UL, rejected.BatchId);
        Assert.Equal(4U, rejected.Rejected);
        Assert.Contains(rejected.RejectedByReason, r => r.Reason == RejectionReason.UnknownSite && r.Count == 4);

        await call.RequestStream.CompleteAsync();
        Assert.False(await call.ResponseStream.MoveNext());
    }

    [Fact]
    public async Task Ingest_NoiselessStaticTag_PoseStreamAndSnapshotReportTruePosition()
    {
        const string site = "e2e";
        await CreateSiteWithMapAsync(site);
        await Server.Sites.PutRobotAsync(new PutRobotRequest
        {
            SiteId = site,
            RobotId = "tug-07",

            // The tag rides 0.5 m above the floor: the server holds a registered ground robot's tag at that height.
            TagOffset = new Vector3 { Z = TagPosition.Z },
            MotionModel = MotionModel.ConstantVelocity,
        }, deadline: Deadline());

        // Subscribe before ingesting so the stream sees the first published pose.
        using var watch = Server.Poses.WatchPoses(new WatchPosesRequest { SiteId = site, RobotIds = { "tug-07" } }, deadline: Deadline());

        // 10 s of noiseless samples at 50 Hz, in batches of 0.5 s.
        var accepted = 0U;
        for (var start = 0; start < 500; start += 25)
        {
            var batch = new MeasurementBatch { SiteId = site, BatchId = (ulong)start };
            batch.Robots.Add(TestScenario.StaticTagSamples("tug-07", TagPosition, start, 25));
            var ack = (await Server.Ingest.SubmitMeasurementsAsync(new SubmitMeasurementsRequest { Batch = batch }, deadline: Deadline())).Ack;
            Assert.Equal(25U, ack.Accepted + ack.DownWeighted + ack.Buffered + ack.Rejected);
            accepted += ack.Accepted + ack.DownWeighted;
        }

        Assert.True(accepted > 400, $"only {accepted} of 500 noiseless samples were used");

        // Latest pose: the closed-form geometry puts the tag exactly at TagPosition.
        var pose = (await Server.Poses.GetPoseAsync(new GetPoseRequest { SiteId = site, RobotId = "tug-07" }, deadline: Deadline())).Pose;
        AssertNear(TagPosition, pose.TagPosition, 0.05);
        Assert.Equal(49, pose.Covariance.Count);
        Assert.Equal(TrackingState.Locked, pose.TrackingState);
        Assert.InRange(TestScenario.Seconds(pose.ValidTime), TestScenario.StartSeconds + 9.9, TestScenario.StartSeconds + 10.0);

        // The stream delivered at least one update of that robot.
        Assert.True(await watch.ResponseStream.MoveNext());
        Assert.All(watch.ResponseStream.Current.Poses, p => Assert.Equal("tug-07", p.RobotId));

        // Snapshot predicted to a common time 0.1 s after the last sample.
        var common = TestScenario.Time(TestScenario.StartSeconds + 10.08);
        var snapshot = await Server.Poses.GetFleetSnapshotAsync(new GetFleetSnapshotRequest { SiteId = site, Time = common }, deadline: Deadline());
        var robot = Assert.Single(snapshot.Poses);
        Assert.Equal(common, snapshot.Time);
        Assert.Equal(common, robot.ValidTime);
        AssertNear(TagPosition, robot.TagPosition, 0.05);

        // The robot is listed with its tracking state.
        var robots = await Server.Sites.ListRobotsAsync(new ListRobotsRequest { SiteId = site }, deadline: Deadline());
        var listed = Assert.Single(robots.Robots);
        Assert.Equal(MotionModel.ConstantVelocity, listed.MotionModel);
        Assert.Equal(TrackingState.Locked, listed.TrackingState);

        // Every anchor was heard; noiseless samples leave small normalised residuals.
        var health = await Server.Sites.ListAnchorHealthAsync(new ListAnchorHealthRequest { SiteId = site }, deadline: Deadline());
        Assert.Equal(TestScenario.Anchors.Length, health.Anchors.Count);
        Assert.All(health.Anchors, a => Assert.True(a.MeasurementsPerSecond > 0 && a.LastHeardTime is not null, a.AnchorId));
    }

    [Fact]
    public async Task ListRobots_RobotOnlySeenThroughIngest_IsListedWithDefaults()
    {
        await CreateSiteWithMapAsync("seen");
        var batch = new MeasurementBatch { SiteId = "seen" };
        batch.Robots.Add(TestScenario.StaticTagSamples("tug-09", TagPosition, 0, 5));
        await Server.Ingest.SubmitMeasurementsAsync(new SubmitMeasurementsRequest { Batch = batch }, deadline: Deadline());

        // Sightings are written in batches on a timer; flush now instead of waiting.
        Server.App.Services.GetRequiredService<RobotActivityLog>().Flush();
        var robots = await Server.Sites.ListRobotsAsync(new ListRobotsRequest { SiteId = "seen" }, deadline: Deadline());
        var robot = Assert.Single(robots.Robots);
        Assert.Equal("tug-09", robot.RobotId);
        Assert.Equal(MotionModel.PlanarOdometry, robot.MotionModel);
        Assert.NotNull(robot.LastSeenTime);
    }

    [Fact]
    public async Task Scrape_AfterCalls_ExposesRpcDurationAndMeasurementCounters()
    {
        await CreateSiteWithMapAsync("metrics");
        var batch = new MeasurementBatch { SiteId = "metrics" };
        batch.Robots.Add(TestScenario.StaticTagSamples("tug-02", TagPosition, 0, 10));
        batch.Robots[0].Tdoa[0].AnchorA = "HP-Z99";
        await Server.Ingest.SubmitMeasurementsAsync(new SubmitMeasurementsRequest { Batch = batch }, deadline: Deadline());

        // The Prometheus exporter appends the unit and _total (OpenTelemetry Prometheus compatibility spec, from memory).
        var text = await Server.ScrapeMetricsAsync();
        Assert.Contains("rpc_server_call_duration_seconds_bucket{", text, StringComparison.Ordinal);
        Assert.Contains("rpc_method=\"fleet.v1.IngestService/SubmitMeasurements\"", text, StringComparison.Ordinal);
        Assert.Contains("rpc_system_name=\"grpc\"", text, StringComparison.Ordinal);
        Assert.Contains("rpc_status_code=\"OK\"", text, StringComparison.Ordinal);
        Assert.Contains("fleet_measurements_total{", text, StringComparison.Ordinal);
        Assert.Contains("fleet_rejection_reason=\"unknown_anchor\"", text, StringComparison.Ordinal);
        Assert.Contains("fleet_anchor_measurements_total{", text, StringComparison.Ordinal);
    }

    private async Task CreateSiteWithMapAsync(string siteId)
    {
        await Server.Sites.CreateSiteAsync(new CreateSiteRequest { SiteId = siteId }, deadline: Deadline());
        var map = await Server.Sites.PutAnchorMapAsync(TestScenario.AnchorMapRequest(siteId), deadline: Deadline());
        Assert.Equal(1U, map.AnchorMap.Version);
    }

    private static void AssertNear((double X, double Y, double Z) expected, Vector3 actual, double tolerance)
    {
        Assert.InRange(actual.X, expected.X - tolerance, expected.X + tolerance);
        Assert.InRange(actual.Y, expected.Y - tolerance, expected.Y + tolerance);
        Assert.InRange(actual.Z, expected.Z - tolerance, expected.Z + tolerance);
    }

    private static DateTime Deadline() => DateTime.UtcNow.Add(Timeout);
}
