using Fleet.Contracts.V1;
using Google.Protobuf;
using Google.Protobuf.WellKnownTypes;
using Google.Rpc;
using Grpc.Core;
using Xunit.Abstractions;

namespace Fleet.Server.Tests.Validation;

/// <summary>
/// Tries every kind of bad input the API knows against a real server over a real channel, counts the cases, and checks
/// each gets the right answer: a canonical status code (grpc/grpc doc/statuscodes.md) with the right
/// google.rpc.BadRequest field path, or, for single samples of a batch, its own rejection reason in the ack while the
/// rest of the batch is applied.
/// </summary>
public sealed class BadInputEndToEndTests(ITestOutputHelper output)
{
    private const string Site = "bad-input";
    private static readonly TimeSpan Timeout = TimeSpan.FromSeconds(30);

    [Fact]
    public async Task EveryBadInput_AnsweredWithItsStatusOrReason_AndGoodSamplesStillApplied()
    {
        await using var server = await ServerHarness.StartAsync(settings: new Dictionary<string, string?>
        {
            ["Fleet:Validation:MaxRobotsPerBatch"] = "8",
            ["Fleet:Validation:MaxSamplesPerBatch"] = "500",
            ["Fleet:Validation:MaxIngestMessageBytes"] = "65536",
            ["Fleet:Validation:MaxAnchorsPerMap"] = "32",
            ["Fleet:Validation:MaxWatchedRobots"] = "50",
        });
        await server.Sites.CreateSiteAsync(new CreateSiteRequest { SiteId = Site }, deadline: Deadline());
        await server.Sites.PutAnchorMapAsync(TestScenario.AnchorMapRequest(Site), deadline: Deadline());

        var failures = new List<string>();
        var rpcCases = 0;

        async Task Expect(string name, StatusCode code, string? field, Func<Task> call)
        {
            rpcCases++;
            try
            {
                await call();
                failures.Add($"{name}: succeeded, expected {code}");
            }
            catch (RpcException e)
            {
                var fields = e.GetRpcStatus()?.GetDetail<BadRequest>()?.FieldViolations.Select(v => v.Field).ToList() ?? [];
                if (e.StatusCode != code)
                {
                    failures.Add($"{name}: {e.StatusCode} ({e.Status.Detail}), expected {code}");
                }
                else if (field is not null && !fields.Contains(field))
                {
                    failures.Add($"{name}: field violations [{string.Join(", ", fields)}] lack {field}");
                }
            }
        }

        var ingest = server.Ingest;
        var sites = server.Sites;
        var poses = server.Poses;
        var audit = new AuditService.AuditServiceClient(server.Channel);
        var good = TestScenario.StaticTagSamples("tug-1", (7.3, 4.1, 0.5), 0, 10);

        // Ingest, whole-batch problems.
        await Expect("submit without batch", StatusCode.InvalidArgument, "batch", () => ingest.SubmitMeasurementsAsync(new SubmitMeasurementsRequest(), deadline: Deadline()).ResponseAsync);
        await Expect("submit bad site id", StatusCode.InvalidArgument, "batch.site_id", () => Submit(ingest, new MeasurementBatch { SiteId = "Harbor Point!" }));
        await Expect("submit empty site id", StatusCode.InvalidArgument, "batch.site_id", () => Submit(ingest, new MeasurementBatch()));
        await Expect("submit unknown site", StatusCode.NotFound, null, () => Submit(ingest, new MeasurementBatch { SiteId = "no-such-site", Robots = { good } }));
        await Expect("submit invalid receive_time", StatusCode.InvalidArgument, "batch.receive_time",
            () => Submit(ingest, new MeasurementBatch { SiteId = Site, ReceiveTime = new Timestamp { Seconds = 1, Nanos = -1 } }));
        await Expect("submit too many robots", StatusCode.InvalidArgument, "batch.robots",
            () => Submit(ingest, Batch(Enumerable.Range(0, 9).Select(i => new RobotSamples { RobotId = $"r{i}" }))));
        await Expect("submit too many samples", StatusCode.InvalidArgument, "batch.robots",
            () => Submit(ingest, Batch([TestScenario.StaticTagSamples("tug-1", (7.3, 4.1, 0.5), 0, 501)])));
        // Larger than the configured 64 KiB message limit: refused before parsing (grpc-dotnet: RESOURCE_EXHAUSTED).
        await Expect("submit oversize message", StatusCode.ResourceExhausted, null,
            () => Submit(ingest, Batch([new RobotSamples { RobotId = new string('x', 100) }, new RobotSamples { RobotId = new string('y', 70_000) }])));
        await Expect("stream bad site id", StatusCode.InvalidArgument, "batch.site_id", async () =>
        {
            using var call = ingest.StreamMeasurements(deadline: Deadline());
            await call.RequestStream.WriteAsync(new StreamMeasurementsRequest { Batch = new MeasurementBatch { SiteId = "UPPER" } });
            await call.RequestStream.CompleteAsync();
            while (await call.ResponseStream.MoveNext())
            {
            }
        });

        // Poses.
        await Expect("get pose bad site id", StatusCode.InvalidArgument, "site_id", () => poses.GetPoseAsync(new GetPoseRequest { SiteId = "", RobotId = "tug-1" }, deadline: Deadline()).ResponseAsync);
        await Expect("get pose empty robot id", StatusCode.InvalidArgument, "robot_id", () => poses.GetPoseAsync(new GetPoseRequest { SiteId = Site }, deadline: Deadline()).ResponseAsync);
        await Expect("get pose control character in robot id", StatusCode.InvalidArgument, "robot_id", () => poses.GetPoseAsync(new GetPoseRequest { SiteId = Site, RobotId = "tug\u0001" }, deadline: Deadline()).ResponseAsync);
        await Expect("get pose unknown site", StatusCode.NotFound, null, () => poses.GetPoseAsync(new GetPoseRequest { SiteId = "nowhere", RobotId = "tug-1" }, deadline: Deadline()).ResponseAsync);
        await Expect("watch negative rate", StatusCode.InvalidArgument, "max_rate_per_robot_hz", () => Watch(poses, new WatchPosesRequest { SiteId = Site, MaxRatePerRobotHz = -1 }));
        await Expect("watch NaN rate", StatusCode.InvalidArgument, "max_rate_per_robot_hz", () => Watch(poses, new WatchPosesRequest { SiteId = Site, MaxRatePerRobotHz = double.NaN }));
        await Expect("watch zone without max", StatusCode.InvalidArgument, "zone", () => Watch(poses, new WatchPosesRequest { SiteId = Site, Zone = new Box { Min = new Vector3() } }));
        await Expect("watch zone min above max", StatusCode.InvalidArgument, "zone",
            () => Watch(poses, new WatchPosesRequest { SiteId = Site, Zone = new Box { Min = new Vector3 { X = 5 }, Max = new Vector3 { X = 1, Y = 1, Z = 1 } } }));
        await Expect("watch zone infinite", StatusCode.InvalidArgument, "zone.max.y",
            () => Watch(poses, new WatchPosesRequest { SiteId = Site, Zone = new Box { Min = new Vector3(), Max = new Vector3 { X = 1, Y = double.PositiveInfinity, Z = 1 } } }));
        await Expect("watch empty robot id", StatusCode.InvalidArgument, "robot_ids[1]", () => Watch(poses, new WatchPosesRequest { SiteId = Site, RobotIds = { "tug-1", "" } }));
        await Expect("watch too many robots", StatusCode.InvalidArgument, "robot_ids",
            () => Watch(poses, new WatchPosesRequest { SiteId = Site, RobotIds = { Enumerable.Range(0, 51).Select(i => $"r{i}") } }));
        await Expect("snapshot invalid time", StatusCode.InvalidArgument, "time",
            () => poses.GetFleetSnapshotAsync(new GetFleetSnapshotRequest { SiteId = Site, Time = new Timestamp { Seconds = 1, Nanos = 2_000_000_000 } }, deadline: Deadline()).ResponseAsync);
        await Expect("snapshot bad site id", StatusCode.InvalidArgument, "site_id", () => poses.GetFleetSnapshotAsync(new GetFleetSnapshotRequest { SiteId = "-x" }, deadline: Deadline()).ResponseAsync);

        // Site administration.
        await Expect("create site bad id", StatusCode.InvalidArgument, "site_id", () => sites.CreateSiteAsync(new CreateSiteRequest { SiteId = "Site A" }, deadline: Deadline()).ResponseAsync);
        await Expect("create site id too long", StatusCode.InvalidArgument, "site_id", () => sites.CreateSiteAsync(new CreateSiteRequest { SiteId = new string('a', 65) }, deadline: Deadline()).ResponseAsync);
        await Expect("create site display name too long", StatusCode.InvalidArgument, "display_name",
            () => sites.CreateSiteAsync(new CreateSiteRequest { SiteId = "long-name", DisplayName = new string('n', 257) }, deadline: Deadline()).ResponseAsync);
        await Expect("create site twice", StatusCode.AlreadyExists, null, () => sites.CreateSiteAsync(new CreateSiteRequest { SiteId = Site }, deadline: Deadline()).ResponseAsync);
        await Expect("get site unknown", StatusCode.NotFound, null, () => sites.GetSiteAsync(new GetSiteRequest { SiteId = "nowhere" }, deadline: Deadline()).ResponseAsync);
        await Expect("list sites bad token", StatusCode.InvalidArgument, "page_token", () => sites.ListSitesAsync(new ListSitesRequest { PageToken = "%%%" }, deadline: Deadline()).ResponseAsync);
        await Expect("map without anchors", StatusCode.InvalidArgument, "anchors", () => sites.PutAnchorMapAsync(new PutAnchorMapRequest { SiteId = Site }, deadline: Deadline()).ResponseAsync);
        await Expect("map too many anchors", StatusCode.InvalidArgument, "anchors", () => sites.PutAnchorMapAsync(ManyAnchors(33), deadline: Deadline()).ResponseAsync);
        await Expect("map anchor without position", StatusCode.InvalidArgument, "anchors[2].position", () => PutMap(sites, m => m.Anchors[2].Position = null));
        await Expect("map NaN position", StatusCode.InvalidArgument, "anchors[1].position.x", () => PutMap(sites, m => m.Anchors[1].Position.X = double.NaN));
        await Expect("map infinite orientation", StatusCode.InvalidArgument, "anchors[0].orientation_deg.z", () => PutMap(sites, m => m.Anchors[0].OrientationDeg.Z = double.NegativeInfinity));
        await Expect("map NaN antenna delay", StatusCode.InvalidArgument, "anchors[3].antenna_delay_m", () => PutMap(sites, m => m.Anchors[3].AntennaDelayM = double.NaN));
        await Expect("map empty anchor id", StatusCode.InvalidArgument, "anchors[4].anchor_id", () => PutMap(sites, m => m.Anchors[4].AnchorId = ""));
        await Expect("map duplicate anchor id", StatusCode.InvalidArgument, null, () => PutMap(sites, m => m.Anchors[5].AnchorId = m.Anchors[0].AnchorId));
        await Expect("map coincident anchors", StatusCode.InvalidArgument, null, () => PutMap(sites, m => m.Anchors[1].Position = m.Anchors[0].Position.Clone()));
        await Expect("get map unknown version", StatusCode.NotFound, null, () => sites.GetAnchorMapAsync(new GetAnchorMapRequest { SiteId = Site, Version = 99 }, deadline: Deadline()).ResponseAsync);
        await Expect("model empty", StatusCode.InvalidArgument, "model", () => sites.UploadBiasModelAsync(new UploadBiasModelRequest { SiteId = Site }, deadline: Deadline()).ResponseAsync);
        await Expect("model garbage", StatusCode.InvalidArgument, "model",
            () => sites.UploadBiasModelAsync(new UploadBiasModelRequest { SiteId = Site, Model = ByteString.CopyFromUtf8("not a model") }, deadline: Deadline()).ResponseAsync);
        await Expect("model description too long", StatusCode.InvalidArgument, "description",
            () => sites.UploadBiasModelAsync(new UploadBiasModelRequest { SiteId = Site, Model = ByteString.CopyFromUtf8("x"), Description = new string('d', 1025) }, deadline: Deadline()).ResponseAsync);
        await Expect("activate unknown model", StatusCode.NotFound, null, () => sites.ActivateBiasModelAsync(new ActivateBiasModelRequest { SiteId = Site, Version = 7 }, deadline: Deadline()).ResponseAsync);
        await Expect("roll back without history", StatusCode.FailedPrecondition, null, () => sites.RollBackBiasModelAsync(new RollBackBiasModelRequest { SiteId = Site }, deadline: Deadline()).ResponseAsync);
        await Expect("list models bad token", StatusCode.InvalidArgument, "page_token", () => sites.ListBiasModelsAsync(new ListBiasModelsRequest { SiteId = Site, PageToken = "eHl6" }, deadline: Deadline()).ResponseAsync);
        await Expect("robot NaN tag offset", StatusCode.InvalidArgument, "tag_offset", () => PutRobot(sites, r => r.TagOffset.Y = double.NaN));
        await Expect("robot tag offset 100 m", StatusCode.InvalidArgument, "tag_offset", () => PutRobot(sites, r => r.TagOffset.X = 100));
        await Expect("robot unspecified motion", StatusCode.InvalidArgument, "motion_model", () => PutRobot(sites, r => r.MotionModel = MotionModel.Unspecified));
        await Expect("robot empty id", StatusCode.InvalidArgument, "robot_id", () => PutRobot(sites, r => r.RobotId = ""));
        await Expect("robot id too long", StatusCode.InvalidArgument, "robot_id", () => PutRobot(sites, r => r.RobotId = new string('r', 129)));
        await Expect("list robots bad site", StatusCode.InvalidArgument, "site_id", () => sites.ListRobotsAsync(new ListRobotsRequest { SiteId = "A" }, deadline: Deadline()).ResponseAsync);
        await Expect("anchor health unknown site", StatusCode.NotFound, null, () => sites.ListAnchorHealthAsync(new ListAnchorHealthRequest { SiteId = "nowhere" }, deadline: Deadline()).ResponseAsync);
        await Expect("audit bad site id", StatusCode.InvalidArgument, "site_id", () => audit.ListAuditEntriesAsync(new ListAuditEntriesRequest { SiteId = "NO" }, deadline: Deadline()).ResponseAsync);
        await Expect("audit bad token", StatusCode.InvalidArgument, "page_token", () => audit.ListAuditEntriesAsync(new ListAuditEntriesRequest { PageToken = Base64("-3") }, deadline: Deadline()).ResponseAsync);

        // Single bad samples inside a batch: each rejected with its reason, the rest applied.
        var (batch, expected, goodCount) = MixedBatch();
        var ack = (await ingest.SubmitMeasurementsAsync(new SubmitMeasurementsRequest { Batch = batch }, deadline: Deadline())).Ack;
        var got = ack.Rejections.Select(r => (r.RobotId, r.Kind, (int)r.Index, r.Reason)).ToHashSet();
        foreach (var e in expected)
        {
            if (!got.Contains(e))
            {
                failures.Add($"sample {e.Robot}/{e.Kind}[{e.Index}]: expected {e.Reason}, ack has {string.Join(", ", ack.Rejections.Where(r => r.RobotId == e.Robot && r.Kind == e.Kind && r.Index == e.Index).Select(r => r.Reason))}");
            }
        }

        var unexpected = got.Where(g => !expected.Contains(g)).ToList();
        Assert.True(unexpected.Count == 0, $"good samples rejected: {string.Join(", ", unexpected)}");
        Assert.Equal((uint)expected.Count, ack.Rejected);
        Assert.Equal((uint)goodCount, ack.Accepted + ack.DownWeighted + ack.Buffered);

        // A stream batch for a site that does not exist is acknowledged, every sample rejected UNKNOWN_SITE.
        using (var stream = ingest.StreamMeasurements(deadline: Deadline()))
        {
            await stream.RequestStream.WriteAsync(new StreamMeasurementsRequest { Batch = new MeasurementBatch { SiteId = "ghost-site", BatchId = 5, Robots = { good.Clone() } } });
            await stream.RequestStream.CompleteAsync();
            Assert.True(await stream.ResponseStream.MoveNext());
            var unknown = stream.ResponseStream.Current.Ack;
            rpcCases++;
            if (unknown.RejectedByReason.SingleOrDefault()?.Reason != RejectionReason.UnknownSite || unknown.Rejected != (uint)good.Tdoa.Count)
            {
                failures.Add($"stream to an unknown site: {unknown}");
            }
        }

        var total = rpcCases + expected.Count;
        output.WriteLine($"bad-input cases tried: {total} ({rpcCases} calls, {expected.Count} single samples); wrong answers: {failures.Count}");
        Assert.True(failures.Count == 0, string.Join(Environment.NewLine, failures));
        Assert.True(total >= 70, $"only {total} cases");
    }

    /// <summary>One batch: good samples of two robots with every kind of bad sample mixed in, and bad robot entries.</summary>
    private static (MeasurementBatch Batch, List<(string Robot, SampleKind Kind, int Index, RejectionReason Reason)> Expected, int GoodCount) MixedBatch()
    {
        var expected = new List<(string, SampleKind, int, RejectionReason)>();
        var tug = TestScenario.StaticTagSamples("tug-1", (7.3, 4.1, 0.5), 0, 30);
        var t = TestScenario.StartSeconds + 0.7;
        var wallNow = DateTimeOffset.UtcNow.ToUnixTimeSeconds();

        void Bad(TdoaSample sample, RejectionReason reason)
        {
            expected.Add(("tug-1", SampleKind.Tdoa, tug.Tdoa.Count, reason));
            tug.Tdoa.Add(sample);
        }

        Bad(new TdoaSample { SampleTime = TestScenario.Time(t), AnchorA = "HP-A01", AnchorB = "HP-A02", DistanceDifference = double.NaN }, RejectionReason.InvalidValue);
        Bad(new TdoaSample { SampleTime = TestScenario.Time(t), AnchorA = "HP-A01", AnchorB = "HP-A02", DistanceDifference = double.NegativeInfinity }, RejectionReason.InvalidValue);
        Bad(new TdoaSample { AnchorA = "HP-A01", AnchorB = "HP-A02", DistanceDifference = 1 }, RejectionReason.InvalidValue);
        Bad(new TdoaSample { SampleTime = new Timestamp { Seconds = (long)t, Nanos = -3 }, AnchorA = "HP-A01", AnchorB = "HP-A02" }, RejectionReason.InvalidValue);
        Bad(new TdoaSample { SampleTime = TestScenario.Time(t), AnchorA = "HP-A03", AnchorB = "HP-A03" }, RejectionReason.SameAnchor);
        Bad(new TdoaSample { SampleTime = TestScenario.Time(t), AnchorA = "HP-A01", AnchorB = "HP-Z99" }, RejectionReason.UnknownAnchor);
        Bad(new TdoaSample { SampleTime = TestScenario.Time(t), AnchorA = "", AnchorB = "HP-A02" }, RejectionReason.UnknownAnchor);
        // HP-A01 (0, 0, 3) to HP-A02 (20, 0, 8): baseline √425 ≈ 20.62 m; by the triangle inequality no tag sees 25 m.
        Bad(new TdoaSample { SampleTime = TestScenario.Time(t), AnchorA = "HP-A01", AnchorB = "HP-A02", DistanceDifference = 25.0 }, RejectionReason.ImpossibleValue);
        Bad(new TdoaSample { SampleTime = TestScenario.Time(t), AnchorA = "HP-A02", AnchorB = "HP-A01", DistanceDifference = -21.5 }, RejectionReason.ImpossibleValue);
        Bad(new TdoaSample { SampleTime = TestScenario.Time(wallNow + 3600), AnchorA = "HP-A01", AnchorB = "HP-A02" }, RejectionReason.TooFarInFuture);
        Bad(new TdoaSample { SampleTime = TestScenario.Time(t - 10), AnchorA = "HP-A01", AnchorB = "HP-A02" }, RejectionReason.TooLate);

        tug.Odometry.Add(new OdometrySample { SampleTime = TestScenario.Time(TestScenario.StartSeconds + 0.1) });
        void BadOdometry(OdometrySample sample, RejectionReason reason)
        {
            expected.Add(("tug-1", SampleKind.Odometry, tug.Odometry.Count, reason));
            tug.Odometry.Add(sample);
        }

        BadOdometry(new OdometrySample { SampleTime = TestScenario.Time(TestScenario.StartSeconds + 0.2), ForwardSpeed = double.NaN }, RejectionReason.InvalidValue);
        BadOdometry(new OdometrySample { SampleTime = TestScenario.Time(TestScenario.StartSeconds + 0.3), YawRate = double.PositiveInfinity }, RejectionReason.InvalidValue);
        BadOdometry(new OdometrySample { SampleTime = TestScenario.Time(TestScenario.StartSeconds + 0.4), ForwardSpeed = 50 }, RejectionReason.ImpossibleValue);
        BadOdometry(new OdometrySample { SampleTime = TestScenario.Time(TestScenario.StartSeconds + 0.5), YawRate = -40 }, RejectionReason.ImpossibleValue);
        BadOdometry(new OdometrySample(), RejectionReason.InvalidValue);

        var batch = new MeasurementBatch { SiteId = Site, BatchId = 42, Robots = { tug } };
        var empty = TestScenario.StaticTagSamples("", (7.3, 4.1, 0.5), 0, 2);
        var repeated = TestScenario.StaticTagSamples("tug-1", (7.3, 4.1, 0.5), 0, 1);
        var control = TestScenario.StaticTagSamples("tug\n2", (7.3, 4.1, 0.5), 0, 1);
        batch.Robots.Add(empty);
        batch.Robots.Add(repeated);
        batch.Robots.Add(control);
        expected.Add(("", SampleKind.Tdoa, 0, RejectionReason.InvalidRobot));
        expected.Add(("", SampleKind.Tdoa, 1, RejectionReason.InvalidRobot));
        expected.Add(("tug-1", SampleKind.Tdoa, 0, RejectionReason.InvalidRobot));
        expected.Add(("tug\n2", SampleKind.Tdoa, 0, RejectionReason.InvalidRobot));
        return (batch, expected, 30 + 1);
    }

    private static PutAnchorMapRequest ManyAnchors(int n)
    {
        var request = new PutAnchorMapRequest { SiteId = Site };
        for (var i = 0; i < n; i++)
        {
            request.Anchors.Add(new Anchor { AnchorId = $"M{i}", Position = new Vector3 { X = i, Y = i % 3, Z = 3 + (i % 4) } });
        }

        return request;
    }

    private static Task PutMap(SiteService.SiteServiceClient sites, Action<PutAnchorMapRequest> spoil)
    {
        var request = TestScenario.AnchorMapRequest(Site);
        spoil(request);
        return sites.PutAnchorMapAsync(request, deadline: Deadline()).ResponseAsync;
    }

    private static Task PutRobot(SiteService.SiteServiceClient sites, Action<PutRobotRequest> spoil)
    {
        var request = new PutRobotRequest { SiteId = Site, RobotId = "tug-9", TagOffset = new Vector3 { Z = 0.4 }, MotionModel = MotionModel.PlanarOdometry };
        spoil(request);
        return sites.PutRobotAsync(request, deadline: Deadline()).ResponseAsync;
    }

    private static Task Submit(IngestService.IngestServiceClient ingest, MeasurementBatch batch) =>
        ingest.SubmitMeasurementsAsync(new SubmitMeasurementsRequest { Batch = batch }, deadline: Deadline()).ResponseAsync;

    private static MeasurementBatch Batch(IEnumerable<RobotSamples> robots) => new() { SiteId = Site, Robots = { robots } };

    private static async Task Watch(PoseService.PoseServiceClient poses, WatchPosesRequest request)
    {
        using var call = poses.WatchPoses(request, deadline: Deadline());
        await call.ResponseStream.MoveNext();
    }

    private static string Base64(string text) => System.Buffers.Text.Base64Url.EncodeToString(System.Text.Encoding.UTF8.GetBytes(text));

    private static DateTime Deadline() => DateTime.UtcNow.Add(Timeout);
}
