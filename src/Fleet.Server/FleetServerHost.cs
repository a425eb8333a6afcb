using Fleet.Server.Hosting;
using Fleet.Server.LiveView;
using Fleet.Server.Security;
using Microsoft.Extensions.Options;

namespace Fleet.Server;

/// <summary>
/// Builds and runs the server, so that `fleet serve`, `fleet demo` and tests can host it in-process.
/// Configuration: section <c>Fleet:Server</c> (<see cref="FleetServerOptions"/>), <c>Fleet:Grains</c>
/// (<see cref="Grains.FleetGrainOptions"/>), and the standard <c>OTEL_*</c> variables.
/// </summary>
public static class FleetServerHost
{
    /// <summary>
    /// Builds the application. <paramref name="configure"/> runs before the server reads its options, so it can add
    /// configuration sources (e.g. in-memory settings) or services (e.g. an in-memory metrics exporter).
    /// Ports set to 0 are replaced by free ports; read them back with <see cref="GetOptions"/>.
    /// </summary>
    public static WebApplication BuildApp(string[] args, Action<WebApplicationBuilder>? configure = null)
    {
        var builder = WebApplication.CreateBuilder(args);
        configure?.Invoke(builder);

        var options = (builder.Configuration.GetSection(FleetServerOptions.SectionName).Get<FleetServerOptions>() ?? new FleetServerOptions()).ResolvePorts();
        builder.Services.AddSingleton(Options.Create(options));
        builder.AddFleetSecurity().AddFleetKestrel(options).AddFleetOrleans(options).AddFleetLiveView(options);
        builder.Services
            .AddFleetCore(builder.Configuration, options)
            .AddFleetGrpc(options)
            .AddFleetTelemetry(builder.Configuration, options);

        var app = builder.Build();
        app.MapFleetEndpoints(options);
        return app;
    }

    /// <summary>
    /// Builds and starts the server. When a port picked for a 0 setting was taken by someone else between picking and
    /// binding (possible on a busy machine), it retries with fresh ports, up to <paramref name="attempts"/> times.
    /// </summary>
    public static async Task<WebApplication> StartAsync(string[] args, Action<WebApplicationBuilder>? configure = null, int attempts = 3, CancellationToken cancellationToken = default)
    {
        for (var attempt = 1; ; attempt++)
        {
            var app = BuildApp(args, configure);
            try
            {
                await app.StartAsync(cancellationToken);
                app.Logger.LogWarning(SafetyNotice.Text);
                return app;
            }
            catch (Exception e) when (attempt < attempts && IsAddressInUse(e))
            {
                await app.DisposeAsync();
            }
        }
    }

    /// <summary>Builds, starts and runs the server until <paramref name="cancellationToken"/> fires or the host is stopped.</summary>
    public static async Task<int> RunAsync(string[] args, Action<WebApplicationBuilder>? configure = null, CancellationToken cancellationToken = default)
    {
        await using var app = await StartAsync(args, configure, cancellationToken: cancellationToken);
        await app.WaitForShutdownAsync(cancellationToken);
        return 0;
    }

    /// <summary>The resolved options (actual ports) of a built application.</summary>
    public static FleetServerOptions GetOptions(WebApplication app) => app.Services.GetRequiredService<IOptions<FleetServerOptions>>().Value;

    /// <summary>The address a gRPC client on this machine should use, e.g. http://127.0.0.1:50051 (https with TLS).</summary>
    public static Uri GetGrpcAddress(WebApplication app)
    {
        var o = GetOptions(app);
        var host = o.ListenAddress is "localhost" or "*" or "0.0.0.0" or "::" ? "127.0.0.1" : o.ListenAddress;
        var scheme = app.Services.GetRequiredService<FleetSecurityOptions>().Tls.IsConfigured ? "https" : "http";
        return new Uri($"{scheme}://{(host.Contains(':', StringComparison.Ordinal) ? $"[{host}]" : host)}:{o.GrpcPort}");
    }

    private static bool IsAddressInUse(Exception? e)
    {
        for (; e is not null; e = e.InnerException)
        {
            if (e is System.Net.Sockets.SocketException { SocketErrorCode: System.Net.Sockets.SocketError.AddressAlreadyInUse }
                or Microsoft.AspNetCore.Connections.AddressInUseException)
            {
                return true;
            }

            if (e is AggregateException aggregate && aggregate.InnerExceptions.Any(IsAddressInUse))
            {
                return true;
            }
        }

        return false;
    }

    private static void MapFleetEndpoints(this WebApplication app, FleetServerOptions options)
    {
        if (options.MetricsPort > 0)
        {
            // Only on the internal port: the gRPC port never serves /metrics.
            var port = options.MetricsPort;
            app.UseOpenTelemetryPrometheusScrapingEndpoint(context => context.Connection.LocalPort == port && context.Request.Path == "/metrics");
        }

        app.UseFleetSecurity().MapFleetGrpcServices();
        app.MapFleetLiveView();
    }
}
