using System.Net;
using System.Text.Json;
using Fleet.Contracts.V1;
using Fleet.Data;
using Fleet.Server.LiveView;
using Fleet.Simulation;
using MathNet.Numerics.Distributions;
using MathNet.Numerics.LinearAlgebra;

namespace Fleet.Server.Tests;

/// <summary>A server with the live view on a free port, one site with a site file (racks) and one with a static tag.</summary>
public sealed class LiveViewServer : IAsyncLifetime
{
    public const string RackSite = "lv-racks";
    public const string TagSite = "lv-tag";

    public ServerHarness Server { get; private set; } = null!;

    public string SiteFilePath { get; private set; } = null!;

    public int RackCount { get; private set; }

    public async Task InitializeAsync()
    {
        var data = ServerHarness.NewDataDirectory();
        Directory.CreateDirectory(data);
        SiteFilePath = Path.Combine(data, "site.json");
        var layout = WarehouseSites.Build(WarehouseSites.Tall);
        RackCount = layout.Racks.Count;
        SiteFile.Write(SiteFilePath, layout);
        Server = await ServerHarness.StartAsync(data, new Dictionary<string, string?> { [$"Fleet:LiveView:SiteFiles:{RackSite}"] = SiteFilePath });
        var deadline = DateTime.UtcNow.AddSeconds(30);
        await Server.Sites.CreateSiteAsync(new CreateSiteRequest { SiteId = RackSite }, deadline: deadline);
        await Server.Sites.PutAnchorMapAsync(Clients.SiteSetup.ToRequest(RackSite, layout.Anchors), deadline: deadline);
        await Server.Sites.CreateSiteAsync(new CreateSiteRequest { SiteId = TagSite }, deadline: deadline);
        await Server.Sites.PutAnchorMapAsync(TestScenario.AnchorMapRequest(TagSite), deadline: deadline);
    }

    public async Task DisposeAsync() => await Server.DisposeAsync();
}

public sealed class LiveViewEndpointTests(LiveViewServer fixture) : IClassFixture<LiveViewServer>
{
    private static readonly TimeSpan Timeout = TimeSpan.FromSeconds(30);

    private Uri Base => new(LiveViewEndpoints.GetAddress(fixture.Server.App)!, "/");

    [Fact]
    public async Task Floor_SiteWithSiteFile_HasRacksAnchorsAndMapsWithUnits()
    {
        using var http = new HttpClient { BaseAddress = Base, Timeout = Timeout };
        using var plan = JsonDocument.Parse(await http.GetStringAsync($"/api/view/{LiveViewServer.RackSite}/floor?height=0.5"));
        var root = plan.RootElement;

        Assert.Equal(fixture.RackCount, root.GetProperty("racks").GetArrayLength());
        Assert.Equal(WarehouseSites.Build(WarehouseSites.Tall).Anchors.Count, root.GetProperty("anchors").GetArrayLength());
        Assert.Equal(0.5, root.GetProperty("tagHeight").GetDouble(), 9);
        var grid = root.GetProperty("grid");
        var cells = grid.GetProperty("nx").GetInt32() * grid.GetProperty("ny").GetInt32();
        var maps = root.GetProperty("maps").EnumerateArray().ToDictionary(m => m.GetProperty("key").GetString()!, m => m);
        Assert.Equal("m/m", maps["hdop"].GetProperty("unit").GetString());
        Assert.Equal("m", maps["crlb"].GetProperty("unit").GetString());
        Assert.Equal(cells, maps["hdop"].GetProperty("values").GetArrayLength());
        Assert.Equal(cells, maps["crlb"].GetProperty("values").GetArrayLength());

        // The legend's probabilities are the chi-square CDF with 2 dof at k² (MathNet as the reference): 39.3 % and 86.5 %.
        foreach (var e in root.GetProperty("ellipses").EnumerateArray())
        {
            var k = e.GetProperty("k").GetDouble();
            Assert.Equal(ChiSquared.CDF(2, k * k), e.GetProperty("probability").GetDouble(), 5);
        }

        // Boresights are unit vectors (rotation of body +x; README "Files" conventions).
        foreach (var a in root.GetProperty("anchors").EnumerateArray())
        {
            var b = Vector<double>.Build.Dense([a.GetProperty("bx").GetDouble(), a.GetProperty("by").GetDouble(), a.GetProperty("bz").GetDouble()]);
            Assert.Equal(1.0, b.L2Norm(), 5);
        }
    }

    [Fact]
    public async Task Events_StaticTag_PoseEllipseMatchesEigenDecompositionOfGrpcCovariance()
    {
        var batch = new MeasurementBatch { SiteId = LiveViewServer.TagSite };
        batch.Robots.Add(TestScenario.StaticTagSamples("tug-01", (7.3, 4.1, 0.5), 0, 120));
        await fixture.Server.Ingest.SubmitMeasurementsAsync(new SubmitMeasurementsRequest { Batch = batch }, deadline: DateTime.UtcNow.Add(Timeout));
        var pose = (await fixture.Server.Poses.GetPoseAsync(new GetPoseRequest { SiteId = LiveViewServer.TagSite, RobotId = "tug-01" }, deadline: DateTime.UtcNow.Add(Timeout))).Pose;

        using var http = new HttpClient { BaseAddress = Base, Timeout = System.Threading.Timeout.InfiniteTimeSpan };
        using var cts = new CancellationTokenSource(Timeout);
        using var response = await http.GetAsync($"/api/view/{LiveViewServer.TagSite}/events", HttpCompletionOption.ResponseHeadersRead, cts.Token);
        Assert.Equal("text/event-stream", response.Content.Headers.ContentType?.MediaType);
        using var reader = new StreamReader(await response.Content.ReadAsStreamAsync(cts.Token));
        JsonElement robot = default;
        string? eventName = null;
        while (robot.ValueKind == JsonValueKind.Undefined && await reader.ReadLineAsync(cts.Token) is { } line)
        {
            if (line.StartsWith("event: ", StringComparison.Ordinal))
            {
                eventName = line[7..];
            }
            else if (eventName == "poses" && line.StartsWith("data: ", StringComparison.Ordinal))
            {
                robot = JsonDocument.Parse(line[6..]).RootElement.GetProperty("robots").EnumerateArray().First(r => r.GetProperty("id").GetString() == "tug-01").Clone();
            }
        }

        // Same pose as the gRPC API (the tag stands still and no further data arrives).
        Assert.Equal(pose.Position.X, robot.GetProperty("x").GetDouble(), 3);
        Assert.Equal(pose.Position.Y, robot.GetProperty("y").GetDouble(), 3);

        // Reference: MathNet's symmetric eigen-decomposition of the horizontal 2×2 block of the gRPC covariance
        // (row-major 7×7: xx at 0, xy at 1, yy at 8): semi-axes √λ, major axis along the larger eigenvector.
        var c = pose.Covariance;
        var evd = Matrix<double>.Build.DenseOfArray(new[,] { { c[0], c[1] }, { c[1], c[8] } }).Evd(Symmetricity.Symmetric);
        var lambdas = evd.EigenValues.Select(v => v.Real).ToArray();
        var major = lambdas[0] >= lambdas[1] ? 0 : 1;
        var a = robot.GetProperty("a").GetDouble();
        var b = robot.GetProperty("b").GetDouble();
        var angle = robot.GetProperty("angle").GetDouble();
        Assert.Equal(Math.Sqrt(lambdas[major]), a, 4);
        Assert.Equal(Math.Sqrt(lambdas[1 - major]), b, 4);
        var v = evd.EigenVectors.Column(major);
        Assert.Equal(0.0, (Math.Cos(angle) * v[1]) - (Math.Sin(angle) * v[0]), 2);
        Assert.Equal("locked", robot.GetProperty("state").GetString());
    }

    [Fact]
    public async Task LiveViewPaths_UnknownSiteBadHeightOtherPorts_AnswerClearly()
    {
        using var http = new HttpClient { BaseAddress = Base, Timeout = Timeout };

        var page = await http.GetAsync($"/view/{LiveViewServer.RackSite}");
        Assert.Equal(HttpStatusCode.OK, page.StatusCode);
        // No external traffic: the page may load scripts, styles and data only from its own origin.
        Assert.Contains("default-src 'none'", page.Headers.GetValues("Content-Security-Policy").Single(), StringComparison.Ordinal);
        var script = await http.GetAsync("/assets/live-view.js");
        Assert.Equal(HttpStatusCode.OK, script.StatusCode);
        Assert.Equal("text/javascript", script.Content.Headers.ContentType?.MediaType);

        Assert.Equal(HttpStatusCode.NotFound, (await http.GetAsync("/view/no-such-site")).StatusCode);
        Assert.Equal(HttpStatusCode.NotFound, (await http.GetAsync("/api/view/no-such-site/floor")).StatusCode);
        Assert.Equal(HttpStatusCode.NotFound, (await http.GetAsync("/api/view/no-such-site/events")).StatusCode);
        var badHeight = await http.GetAsync($"/api/view/{LiveViewServer.RackSite}/floor?height=tall");
        Assert.Equal(HttpStatusCode.BadRequest, badHeight.StatusCode);
        Assert.Contains("height", await badHeight.Content.ReadAsStringAsync(), StringComparison.Ordinal);
        Assert.Equal(HttpStatusCode.BadRequest, (await http.GetAsync($"/api/view/{LiveViewServer.RackSite}/floor?height=1e9")).StatusCode);

        // The metrics port serves only /metrics, and the gRPC port (HTTP/2 prior knowledge) no pages.
        using var metrics = new HttpClient { BaseAddress = new Uri($"http://127.0.0.1:{fixture.Server.Options.MetricsPort}/"), Timeout = Timeout };
        Assert.Equal(HttpStatusCode.NotFound, (await metrics.GetAsync($"/view/{LiveViewServer.RackSite}")).StatusCode);
        using var grpcPort = new HttpClient { BaseAddress = new Uri($"http://127.0.0.1:{fixture.Server.Options.GrpcPort}/"), Timeout = Timeout };
        using var h2 = new HttpRequestMessage(HttpMethod.Get, $"/view/{LiveViewServer.RackSite}") { Version = HttpVersion.Version20, VersionPolicy = HttpVersionPolicy.RequestVersionExact };
        Assert.Equal(HttpStatusCode.NotFound, (await grpcPort.SendAsync(h2)).StatusCode);
    }
}
