using Fleet.Contracts.V1;
using Grpc.Net.Client;
using Microsoft.AspNetCore.Builder;
using Microsoft.Extensions.Configuration;

namespace Fleet.Server.Tests;

/// <summary>
/// A real server on Kestrel loopback (free ports) with its own data directory, and a real gRPC channel to it.
/// </summary>
public sealed class ServerHarness : IAsyncDisposable
{
    private ServerHarness(WebApplication app, string dataDirectory, GrpcChannelOptions? channelOptions)
    {
        App = app;
        DataDirectory = dataDirectory;
        Options = FleetServerHost.GetOptions(app);
        Channel = GrpcChannel.ForAddress(FleetServerHost.GetGrpcAddress(app), channelOptions ?? new GrpcChannelOptions());
        Sites = new SiteService.SiteServiceClient(Channel);
        Ingest = new IngestService.IngestServiceClient(Channel);
        Poses = new PoseService.PoseServiceClient(Channel);
    }

    public WebApplication App { get; }

    public string DataDirectory { get; }

    public FleetServerOptions Options { get; }

    public GrpcChannel Channel { get; }

    public SiteService.SiteServiceClient Sites { get; }

    public IngestService.IngestServiceClient Ingest { get; }

    public PoseService.PoseServiceClient Poses { get; }

    public static string NewDataDirectory() => Path.Combine(Path.GetTempPath(), "fleet-server-tests", Guid.NewGuid().ToString("N"));

    public static async Task<ServerHarness> StartAsync(string? dataDirectory = null, IDictionary<string, string?>? settings = null, GrpcChannelOptions? channelOptions = null)
    {
        dataDirectory ??= NewDataDirectory();
        var config = new Dictionary<string, string?>
        {
            ["Fleet:Server:DataDirectory"] = dataDirectory,
            ["Fleet:Server:ListenAddress"] = "127.0.0.1",
            ["Fleet:Server:GrpcPort"] = "0",
            ["Fleet:Server:MetricsPort"] = "0",
            ["Fleet:LiveView:Port"] = "0",
            ["Fleet:Server:SiloPort"] = "0",
            ["Fleet:Server:GatewayPort"] = "0",
            ["Logging:LogLevel:Default"] = "Warning",
            // Tests of the main job run without credentials; security tests override this.
            ["Fleet:Security:AllowAnonymous"] = "true",
        };
        foreach (var (key, value) in settings ?? new Dictionary<string, string?>())
        {
            config[key] = value;
        }

        var app = await FleetServerHost.StartAsync([], builder => builder.Configuration.AddInMemoryCollection(config)).WaitAsync(TimeSpan.FromSeconds(90));
        return new ServerHarness(app, dataDirectory, channelOptions);
    }

    public async Task<string> ScrapeMetricsAsync()
    {
        using var http = new HttpClient();
        return await http.GetStringAsync(new Uri($"http://127.0.0.1:{Options.MetricsPort}/metrics")).WaitAsync(TimeSpan.FromSeconds(30));
    }

    public async ValueTask DisposeAsync()
    {
        Channel.Dispose();
        await App.StopAsync().WaitAsync(TimeSpan.FromSeconds(60));
        await App.DisposeAsync();
    }
}

/// <summary>One server shared by the tests of a class (starting a silo takes a second or two).</summary>
public sealed class SharedServer : IAsyncLifetime
{
    public ServerHarness Server { get; private set; } = null!;

    public async Task InitializeAsync() => Server = await ServerHarness.StartAsync();

    public async Task DisposeAsync()
    {
        await Server.DisposeAsync();
        try
        {
            Directory.Delete(Server.DataDirectory, recursive: true);
        }
        catch (IOException)
        {
            // A temp directory left behind is harmless.
        }
    }
}
