using Fleet.Contracts.V1;
using Fleet.Server.Security;
using Grpc.Core;
using Grpc.Health.V1;
using Grpc.Net.Client;
using Microsoft.Extensions.Configuration;
using Microsoft.Extensions.DependencyInjection;

namespace Fleet.Server.Tests.Security;

/// <summary>
/// TLS, API keys, JWT, per-site roles and the audit log against a real server over a real TLS channel. Expected codes
/// follow the gRPC status code definitions (grpc/grpc doc/statuscodes.md): no or bad credential UNAUTHENTICATED,
/// a credential without the right PERMISSION_DENIED.
/// </summary>
public sealed class SecurityTests(SecureServer shared) : IClassFixture<SecureServer>, IAsyncLifetime
{
    private static readonly TimeSpan Timeout = TimeSpan.FromSeconds(30);

    private ServerHarness Server => shared.Server;

    public async Task InitializeAsync()
    {
        foreach (var site in new[] { "sec-a", "sec-b" })
        {
            try
            {
                await Server.Sites.CreateSiteAsync(new CreateSiteRequest { SiteId = site, DisplayName = "Harbor Point DC" }, SecureServer.As("admin-all"), Deadline());
                await Server.Sites.PutAnchorMapAsync(TestScenario.AnchorMapRequest(site), SecureServer.As("admin-all"), Deadline());
            }
            catch (RpcException e) when (e.StatusCode == StatusCode.AlreadyExists)
            {
                // Another test of the class made it.
            }
        }
    }

    public Task DisposeAsync() => Task.CompletedTask;

    [Fact]
    public async Task Calls_OverTlsWithTheRightRole_Succeed()
    {
        Assert.Equal("https", FleetServerHost.GetGrpcAddress(Server.App).Scheme);

        var ack = await Server.Ingest.SubmitMeasurementsAsync(
            new SubmitMeasurementsRequest { Batch = new MeasurementBatch { SiteId = "sec-a", BatchId = 1, Robots = { TestScenario.StaticTagSamples("tug-1", (7, 4, 0.5), 0, 20) } } },
            SecureServer.As("gateway-a"), Deadline());
        var site = await Server.Sites.GetSiteAsync(new GetSiteRequest { SiteId = "sec-a" }, SecureServer.As("reader-a"), Deadline());
        var adminRead = await Server.Sites.GetSiteAsync(new GetSiteRequest { SiteId = "sec-a" }, SecureServer.As("admin-a"), Deadline());

        Assert.Equal(20U, ack.Ack.Accepted + ack.Ack.DownWeighted + ack.Ack.Buffered + ack.Ack.Rejected);
        Assert.Equal("sec-a", site.Site.SiteId);
        Assert.Equal("sec-a", adminRead.Site.SiteId);
    }

    [Fact]
    public async Task EveryRpc_OtherSiteOrMissingRole_PermissionDenied()
    {
        var a = "sec-a";
        var b = "sec-b";
        var batchB = new MeasurementBatch { SiteId = b, Robots = { TestScenario.StaticTagSamples("tug-1", (7, 4, 0.5), 0, 5) } };
        var audit = new AuditService.AuditServiceClient(Server.Channel);
        var cases = new List<(string Name, Func<Task> Call)>
        {
            ("gateway-a submits to b", () => Server.Ingest.SubmitMeasurementsAsync(new SubmitMeasurementsRequest { Batch = batchB }, SecureServer.As("gateway-a"), Deadline()).ResponseAsync),
            ("gateway-a streams to b", () => StreamOne(SecureServer.As("gateway-a"), batchB)),
            ("gateway-a reads a pose of a", () => Server.Poses.GetPoseAsync(new GetPoseRequest { SiteId = a, RobotId = "tug-1" }, SecureServer.As("gateway-a"), Deadline()).ResponseAsync),
            ("gateway-a snapshots a", () => Server.Poses.GetFleetSnapshotAsync(new GetFleetSnapshotRequest { SiteId = a }, SecureServer.As("gateway-a"), Deadline()).ResponseAsync),
            ("gateway-a gets site a", () => Server.Sites.GetSiteAsync(new GetSiteRequest { SiteId = a }, SecureServer.As("gateway-a"), Deadline()).ResponseAsync),
            ("reader-a submits to a", () => Server.Ingest.SubmitMeasurementsAsync(new SubmitMeasurementsRequest { Batch = new MeasurementBatch { SiteId = a } }, SecureServer.As("reader-a"), Deadline()).ResponseAsync),
            ("reader-a reads a pose of b", () => Server.Poses.GetPoseAsync(new GetPoseRequest { SiteId = b, RobotId = "tug-1" }, SecureServer.As("reader-a"), Deadline()).ResponseAsync),
            ("reader-a watches b", () => WatchOne(SecureServer.As("reader-a"), b)),
            ("reader-a snapshots b", () => Server.Poses.GetFleetSnapshotAsync(new GetFleetSnapshotRequest { SiteId = b }, SecureServer.As("reader-a"), Deadline()).ResponseAsync),
            ("reader-a gets site b", () => Server.Sites.GetSiteAsync(new GetSiteRequest { SiteId = b }, SecureServer.As("reader-a"), Deadline()).ResponseAsync),
            ("reader-a gets map of b", () => Server.Sites.GetAnchorMapAsync(new GetAnchorMapRequest { SiteId = b }, SecureServer.As("reader-a"), Deadline()).ResponseAsync),
            ("reader-a lists models of b", () => Server.Sites.ListBiasModelsAsync(new ListBiasModelsRequest { SiteId = b }, SecureServer.As("reader-a"), Deadline()).ResponseAsync),
            ("reader-a lists robots of b", () => Server.Sites.ListRobotsAsync(new ListRobotsRequest { SiteId = b }, SecureServer.As("reader-a"), Deadline()).ResponseAsync),
            ("reader-a lists anchor health of b", () => Server.Sites.ListAnchorHealthAsync(new ListAnchorHealthRequest { SiteId = b }, SecureServer.As("reader-a"), Deadline()).ResponseAsync),
            ("reader-a puts a map on a", () => Server.Sites.PutAnchorMapAsync(TestScenario.AnchorMapRequest(a), SecureServer.As("reader-a"), Deadline()).ResponseAsync),
            ("reader-a puts a robot on a", () => Server.Sites.PutRobotAsync(new PutRobotRequest { SiteId = a, RobotId = "tug-1", TagOffset = new Vector3(), MotionModel = MotionModel.PlanarOdometry }, SecureServer.As("reader-a"), Deadline()).ResponseAsync),
            ("reader-a reads the audit log of a", () => audit.ListAuditEntriesAsync(new ListAuditEntriesRequest { SiteId = a }, SecureServer.As("reader-a"), Deadline()).ResponseAsync),
            ("reader-a reads the whole audit log", () => audit.ListAuditEntriesAsync(new ListAuditEntriesRequest(), SecureServer.As("reader-a"), Deadline()).ResponseAsync),
            ("admin-a creates a site", () => Server.Sites.CreateSiteAsync(new CreateSiteRequest { SiteId = "sec-c" }, SecureServer.As("admin-a"), Deadline()).ResponseAsync),
            ("admin-a puts a map on b", () => Server.Sites.PutAnchorMapAsync(TestScenario.AnchorMapRequest(b), SecureServer.As("admin-a"), Deadline()).ResponseAsync),
            ("admin-a activates a model on b", () => Server.Sites.ActivateBiasModelAsync(new ActivateBiasModelRequest { SiteId = b, Version = 0 }, SecureServer.As("admin-a"), Deadline()).ResponseAsync),
            ("admin-a rolls back b", () => Server.Sites.RollBackBiasModelAsync(new RollBackBiasModelRequest { SiteId = b }, SecureServer.As("admin-a"), Deadline()).ResponseAsync),
            ("admin-a uploads a model to b", () => Server.Sites.UploadBiasModelAsync(new UploadBiasModelRequest { SiteId = b, Model = Google.Protobuf.ByteString.CopyFromUtf8("x") }, SecureServer.As("admin-a"), Deadline()).ResponseAsync),
            ("admin-a reads the audit log of b", () => audit.ListAuditEntriesAsync(new ListAuditEntriesRequest { SiteId = b }, SecureServer.As("admin-a"), Deadline()).ResponseAsync),
            ("admin-a submits to a", () => Server.Ingest.SubmitMeasurementsAsync(new SubmitMeasurementsRequest { Batch = new MeasurementBatch { SiteId = a } }, SecureServer.As("admin-a"), Deadline()).ResponseAsync),
            ("jwt read:sec-b reads a", () => Server.Sites.GetSiteAsync(new GetSiteRequest { SiteId = a }, SecureServer.Bearer(SecureServer.Token("alice", "read:sec-b")), Deadline()).ResponseAsync),
        };

        var wrong = new List<string>();
        foreach (var (name, call) in cases)
        {
            var code = await CodeOf(call);
            if (code != StatusCode.PermissionDenied)
            {
                wrong.Add($"{name}: {code}");
            }
        }

        Assert.True(wrong.Count == 0, string.Join("; ", wrong));
    }

    [Fact]
    public async Task ListSites_ReaderOfOneSite_SeesOnlyThatSite()
    {
        var reader = await Server.Sites.ListSitesAsync(new ListSitesRequest { PageSize = 1 }, SecureServer.As("reader-a"), Deadline());
        var admin = await Server.Sites.ListSitesAsync(new ListSitesRequest(), SecureServer.As("admin-all"), Deadline());

        Assert.Equal(["sec-a"], reader.Sites.Select(s => s.SiteId));
        Assert.Empty(reader.NextPageToken);
        Assert.Contains(admin.Sites, s => s.SiteId == "sec-b");
    }

    [Fact]
    public async Task Calls_WithoutOrWithWrongCredential_Unauthenticated_HealthStaysOpen()
    {
        var none = await CodeOf(() => Server.Sites.GetSiteAsync(new GetSiteRequest { SiteId = "sec-a" }, deadline: Deadline()).ResponseAsync);
        var wrongKey = await CodeOf(() => Server.Sites.GetSiteAsync(new GetSiteRequest { SiteId = "sec-a" }, new Metadata { { "x-api-key", "not-a-key" } }, Deadline()).ResponseAsync);
        var stream = await CodeOf(() => StreamOne(new Metadata(), new MeasurementBatch { SiteId = "sec-a" }));
        var expired = await CodeOf(() => Server.Sites.GetSiteAsync(new GetSiteRequest { SiteId = "sec-b" },
            SecureServer.Bearer(SecureServer.Token("alice", "read:sec-b", DateTime.UtcNow.AddMinutes(-10))), Deadline()).ResponseAsync);
        var forged = await CodeOf(() => Server.Sites.GetSiteAsync(new GetSiteRequest { SiteId = "sec-b" },
            SecureServer.Bearer(SecureServer.Token("alice", "read:sec-b", key: new byte[32])), Deadline()).ResponseAsync);
        var health = await new Health.HealthClient(Server.Channel).CheckAsync(new HealthCheckRequest { Service = "readiness" }, deadline: Deadline());

        Assert.Equal(StatusCode.Unauthenticated, none);
        Assert.Equal(StatusCode.Unauthenticated, wrongKey);
        Assert.Equal(StatusCode.Unauthenticated, stream);
        Assert.Equal(StatusCode.Unauthenticated, expired);
        Assert.Equal(StatusCode.Unauthenticated, forged);
        // Probes carry no credentials (Kubernetes gRPC probes: no TLS or auth options), so health is anonymous.
        Assert.Equal(HealthCheckResponse.Types.ServingStatus.Serving, health.Status);
    }

    [Fact]
    public async Task PlaintextHealthPort_AnswersHealthOnly()
    {
        var port = Server.App.Services.GetRequiredService<FleetSecurityOptions>().Tls.PlaintextHealthPort;
        using var probe = GrpcChannel.ForAddress($"http://127.0.0.1:{port}");

        var health = await new Health.HealthClient(probe).CheckAsync(new HealthCheckRequest { Service = "liveness" }, deadline: Deadline());
        var other = await CodeOf(() => new SiteService.SiteServiceClient(probe).ListSitesAsync(new ListSitesRequest(), SecureServer.As("admin-all"), Deadline()).ResponseAsync);

        // Kubernetes gRPC probes carry no TLS or credentials (Kubernetes docs, configure liveness/readiness probes).
        Assert.Equal(HealthCheckResponse.Types.ServingStatus.Serving, health.Status);
        // HTTP 404 maps to UNIMPLEMENTED (grpc/grpc doc/http-grpc-status-mapping.md).
        Assert.Equal(StatusCode.Unimplemented, other);
    }

    [Fact]
    public async Task Jwt_ValidToken_ReadsItsSite()
    {
        var site = await Server.Sites.GetSiteAsync(new GetSiteRequest { SiteId = "sec-b" }, SecureServer.Bearer(SecureServer.Token("alice", "read:sec-b")), Deadline());

        Assert.Equal("sec-b", site.Site.SiteId);
    }

    [Fact]
    public async Task AdminChanges_AreAudited_WithWhoWhatWhen_PagedAndScoped()
    {
        var before = DateTimeOffset.UtcNow.AddSeconds(-1);
        await Server.Sites.PutRobotAsync(new PutRobotRequest { SiteId = "sec-a", RobotId = "tug-audit", TagOffset = new Vector3 { Z = 0.4 }, MotionModel = MotionModel.PlanarOdometry },
            SecureServer.As("admin-a"), Deadline());
        await Server.Sites.PutAnchorMapAsync(TestScenario.AnchorMapRequest("sec-b"), SecureServer.As("admin-all"), Deadline());
        await Server.Sites.ActivateBiasModelAsync(new ActivateBiasModelRequest { SiteId = "sec-b", Version = 0 }, SecureServer.As("admin-all"), Deadline());
        var audit = new AuditService.AuditServiceClient(Server.Channel);

        var all = new List<AuditEntry>();
        var token = string.Empty;
        do
        {
            var page = await audit.ListAuditEntriesAsync(new ListAuditEntriesRequest { PageSize = 2, PageToken = token }, SecureServer.As("admin-all"), Deadline());
            Assert.True(page.Entries.Count <= 2);
            all.AddRange(page.Entries);
            token = page.NextPageToken;
        }
        while (token.Length > 0);
        var scoped = await audit.ListAuditEntriesAsync(new ListAuditEntriesRequest(), SecureServer.As("admin-a"), Deadline());

        // Newest first, each sequence once.
        Assert.Equal(all.Select(e => e.Sequence).OrderDescending(), all.Select(e => e.Sequence));
        Assert.Equal(all.Count, all.Select(e => e.Sequence).Distinct().Count());
        var robot = Assert.Single(all, e => e.Action == AuditAction.PutRobot && e.Details.Contains("tug-audit", StringComparison.Ordinal));
        Assert.Equal("api-key:admin-a", robot.Principal);
        Assert.Equal("sec-a", robot.SiteId);
        Assert.True(robot.ChangeTime.ToDateTimeOffset() >= before);
        Assert.Contains(all, e => e.Action == AuditAction.PutAnchorMap && e.SiteId == "sec-b" && e.Principal == "api-key:admin-all");
        Assert.Contains(all, e => e.Action == AuditAction.ActivateBiasModel && e.SiteId == "sec-b");
        Assert.Contains(all, e => e.Action == AuditAction.CreateSite && e.SiteId == "sec-a");
        Assert.All(scoped.Entries, e => Assert.Equal("sec-a", e.SiteId));
        Assert.Contains(scoped.Entries, e => e.Details.Contains("tug-audit", StringComparison.Ordinal));
    }

    [Fact]
    public async Task Tls_PfxCertificate_ServesTheSameIdentity()
    {
        var settings = SecureServer.KeySettings();
        settings["Fleet:Security:Tls:CertificatePath"] = shared.Certificates.PfxPath;
        settings["Fleet:Security:Tls:Password"] = "pfx-password";
        await using var server = await ServerHarness.StartAsync(settings: settings, channelOptions: new GrpcChannelOptions { HttpHandler = shared.Certificates.ClientHandler() });

        var list = await server.Sites.ListSitesAsync(new ListSitesRequest(), SecureServer.As("admin-all"), Deadline());

        Assert.Empty(list.Sites);
    }

    [Fact]
    public void BuildApp_NoAuthenticationConfigured_RefusesWithClearMessage()
    {
        var e = Assert.Throws<InsecureConfigurationException>(() => FleetServerHost.BuildApp([], builder => builder.Configuration.AddInMemoryCollection(new Dictionary<string, string?>
        {
            ["Fleet:Server:DataDirectory"] = ServerHarness.NewDataDirectory(),
        })));

        Assert.Contains("Fleet:Security:AllowAnonymous=true", e.Message, StringComparison.Ordinal);
        Assert.Contains("--insecure-no-auth", e.Message, StringComparison.Ordinal);
    }

    [Fact]
    public void BuildApp_MalformedGrant_NamesTheSetting()
    {
        var e = Assert.Throws<InvalidOperationException>(() => FleetServerHost.BuildApp([], builder => builder.Configuration.AddInMemoryCollection(new Dictionary<string, string?>
        {
            ["Fleet:Server:DataDirectory"] = ServerHarness.NewDataDirectory(),
            ["Fleet:Security:ApiKeys:0:Name"] = "gw",
            ["Fleet:Security:ApiKeys:0:Sha256"] = ApiKeyTable.Hash("k"),
            ["Fleet:Security:ApiKeys:0:Grants:0"] = "write:site-a",
        })));

        Assert.Contains("Fleet:Security:ApiKeys:0:Grants", e.Message, StringComparison.Ordinal);
    }

    private async Task StreamOne(Metadata headers, MeasurementBatch batch)
    {
        using var call = Server.Ingest.StreamMeasurements(headers, Deadline());
        await call.RequestStream.WriteAsync(new StreamMeasurementsRequest { Batch = batch });
        await call.RequestStream.CompleteAsync();
        while (await call.ResponseStream.MoveNext())
        {
        }
    }

    private async Task WatchOne(Metadata headers, string site)
    {
        using var call = Server.Poses.WatchPoses(new WatchPosesRequest { SiteId = site }, headers, DateTime.UtcNow.AddSeconds(5));
        await call.ResponseStream.MoveNext();
    }

    private static async Task<StatusCode> CodeOf(Func<Task> call)
    {
        try
        {
            await call();
            return StatusCode.OK;
        }
        catch (RpcException e)
        {
            return e.StatusCode;
        }
    }

    private static DateTime Deadline() => DateTime.UtcNow.Add(Timeout);
}
