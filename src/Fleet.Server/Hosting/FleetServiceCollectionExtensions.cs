using System.Net;
using System.Net.Sockets;
using System.Security.Cryptography.X509Certificates;
using Fleet.Grains;
using Fleet.Grains.Health;
using Fleet.Grains.Models;
using Fleet.Grains.Registry;
using Fleet.Grains.Streaming;
using Fleet.Grains.Telemetry;
using Fleet.Server.Cluster;
using Fleet.Server.Grpc;
using Fleet.Server.Models;
using Fleet.Server.Registry;
using Fleet.Server.Security;
using Fleet.Server.Telemetry;
using Microsoft.AspNetCore.Server.Kestrel.Core;
using Microsoft.Extensions.Diagnostics.HealthChecks;
using Microsoft.Extensions.Options;
using OpenTelemetry;
using OpenTelemetry.Metrics;
using OpenTelemetry.Resources;
using OpenTelemetry.Trace;
using Orleans.Configuration;

namespace Fleet.Server.Hosting;

/// <summary>The server's wiring, one method per concern, called from <see cref="FleetServerHost.BuildApp"/>.</summary>
public static class FleetServiceCollectionExtensions
{
    /// <summary>Kestrel: gRPC on an HTTP/2-only port (TLS when Fleet:Security:Tls is set); /metrics on a separate HTTP/1.1 port.</summary>
    public static WebApplicationBuilder AddFleetKestrel(this WebApplicationBuilder builder, FleetServerOptions options)
    {
        var tls = builder.Configuration.ReadSecurityOptions().Tls;
        var certificate = Security.FleetTls.Load(tls);
        builder.WebHost.ConfigureKestrel(kestrel =>
        {
            Listen(kestrel, options.ListenAddress, options.GrpcPort, HttpProtocols.Http2, certificate);
            if (certificate is not null && tls.PlaintextHealthPort > 0)
            {
                Listen(kestrel, options.ListenAddress, tls.PlaintextHealthPort, HttpProtocols.Http2);
            }
            if (options.MetricsPort > 0)
            {
                Listen(kestrel, options.ListenAddress, options.MetricsPort, HttpProtocols.Http1);
            }

            // Reap dead gateway and subscriber connections (Kestrel sends no keep-alive pings by default).
            kestrel.Limits.Http2.KeepAlivePingDelay = TimeSpan.FromSeconds(30);
            kestrel.Limits.Http2.KeepAlivePingTimeout = TimeSpan.FromSeconds(20);
        });
        return builder;
    }

    /// <summary>The SQLite registry, the per-silo services grains use, and the grain options.</summary>
    public static IServiceCollection AddFleetCore(this IServiceCollection services, IConfiguration configuration, FleetServerOptions options)
    {
        services.TryAddSingletonTimeProvider();
        services.Configure<FleetGrainOptions>(configuration.GetSection(FleetGrainOptions.SectionName));
        services.AddFleetRegistry(configuration, options);
        services.AddSingleton(sp => new FleetInstruments(sp.GetRequiredService<System.Diagnostics.Metrics.IMeterFactory>(), options.RobotMetricLabels));
        services.AddSingleton<IBiasModelLoader, BiasModelFileLoader>();
        services.AddSingleton<RobotActivityLog>();
        services.AddHostedService<RobotActivityFlusher>();
        services.AddSingleton<SiteModelCache>();
        services.AddSingleton<PoseHub>();
        services.AddSingleton<AnchorHealthTracker>();
        services.AddSingleton<SiteDirectory>();
        services.AddSingleton<RobotGrainReferences>();
        services.AddSingleton<Recording.IngestRecorder>();
        return services;
    }

    /// <summary>gRPC services with explicit message limits, the RPC metrics interceptor, health checking and reflection.</summary>
    public static IServiceCollection AddFleetGrpc(this IServiceCollection services, FleetServerOptions options)
    {
        services.AddSingleton<RpcMetricsInterceptor>();
        services.AddGrpc(grpc =>
        {
            grpc.Interceptors.Add<RpcMetricsInterceptor>();
            grpc.MaxReceiveMessageSize = options.MaxReceiveMessageBytes;
            grpc.MaxSendMessageSize = options.MaxSendMessageBytes;
            grpc.EnableDetailedErrors = false;
        });
        services.AddGrpcReflection();
        // "" (overall) uses every check; "liveness" only says the process answers (keep it local, so a registry
        // hiccup never gets the pod restarted); "readiness" also needs the site registry.
        services.AddGrpcHealthChecks(health =>
            {
                health.Services.Map(string.Empty, _ => true);
                health.Services.Map("liveness", r => r.Tags.Contains("live"));
                health.Services.Map("readiness", r => r.Tags.Contains("ready"));
            })
            .AddCheck("process", () => HealthCheckResult.Healthy(), ["live"])
            .AddCheck<RegistryHealthCheck>("registry", tags: ["ready"]);
        return services;
    }

    /// <summary>
    /// OpenTelemetry: Fleet, ASP.NET Core, Kestrel, Orleans and .NET runtime meters to the Prometheus endpoint; OTLP for
    /// metrics and traces only when <c>OTEL_EXPORTER_OTLP_ENDPOINT</c> is set (every other <c>OTEL_*</c> variable applies as usual).
    /// </summary>
    public static IServiceCollection AddFleetTelemetry(this IServiceCollection services, IConfiguration configuration, FleetServerOptions options)
    {
        var otlp = TracesExported(configuration);
        var otel = services.AddOpenTelemetry()
            .ConfigureResource(resource =>
            {
                if (string.IsNullOrWhiteSpace(configuration["OTEL_SERVICE_NAME"]))
                {
                    resource.AddService("fleet-server");
                }
            })
            .WithMetrics(metrics =>
            {
                // System.Runtime: the runtime's own GC heap, CPU time and working set, so sizing (`fleet bench cluster`)
                // and operators read memory and CPU per silo from the same endpoint.
                metrics.AddMeter(FleetInstrumentNames.MeterName, "Microsoft.AspNetCore.Hosting", "Microsoft.AspNetCore.Server.Kestrel", "Microsoft.Orleans",
                    "Microsoft.AspNetCore.RateLimiting", "System.Runtime");
                if (options.MetricsPort > 0)
                {
                    metrics.AddPrometheusExporter();
                }
            });
        if (otlp)
        {
            // Traces cost CPU per batch, so they are collected only when something receives them.
            otel.WithTracing(tracing => tracing
                .AddSource(FleetInstrumentNames.ActivitySourceName, "Microsoft.Orleans.Runtime", "Microsoft.Orleans.Application")
                .AddAspNetCoreInstrumentation());
            otel.UseOtlpExporter();
        }

        return services;
    }

    /// <summary>The embedded single silo (localhost clustering, no external service) or a cluster member (<c>Fleet:Cluster</c>).</summary>
    public static WebApplicationBuilder AddFleetOrleans(this WebApplicationBuilder builder, FleetServerOptions options)
    {
        var idle = builder.Configuration.GetSection(FleetGrainOptions.SectionName).Get<FleetGrainOptions>()?.RobotIdleTimeout
            ?? new FleetGrainOptions().RobotIdleTimeout;
        var cluster = builder.Configuration.GetFleetClusterOptions();
        builder.UseOrleans(silo =>
        {
            silo.UseFleetClustering(cluster, options);
            silo.Configure<GrainCollectionOptions>(collection =>
            {
                // Idle grains are looked for once per quantum; a short idle timeout needs a short quantum.
                if (idle < TimeSpan.FromMinutes(2))
                {
                    collection.CollectionQuantum = idle / 2;
                }

                collection.ClassSpecificCollectionAge[typeof(RobotGrain).FullName!] = idle;
                // Site grains hold the list of loaded robots; robots re-attach on a heartbeat if one is unloaded anyway.
                collection.ClassSpecificCollectionAge[typeof(SiteGrain).FullName!] = TimeSpan.FromDays(1);
            });
            // Trace context through grain calls only when traces are exported: the call filters it adds cost every
            // grain call (two per robot per batch) even when nothing listens.
            if (TracesExported(builder.Configuration))
            {
                silo.AddActivityPropagation();
            }
        });
        return builder;
    }

    /// <summary>Traces (and metrics) go to OTLP only when <c>OTEL_EXPORTER_OTLP_ENDPOINT</c> is set.</summary>
    private static bool TracesExported(IConfiguration configuration) => !string.IsNullOrWhiteSpace(configuration["OTEL_EXPORTER_OTLP_ENDPOINT"]);

    /// <summary>Replaces 0 ports with free loopback ports so every listener's port is known before start.</summary>
    public static FleetServerOptions ResolvePorts(this FleetServerOptions options)
    {
        options.GrpcPort = options.GrpcPort == 0 ? FreePort() : options.GrpcPort;
        options.MetricsPort = options.MetricsPort == 0 ? FreePort() : options.MetricsPort;
        options.SiloPort = options.SiloPort == 0 ? FreePort() : options.SiloPort;
        options.GatewayPort = options.GatewayPort == 0 ? FreePort() : options.GatewayPort;
        return options;
    }

    private static int FreePort()
    {
        using var listener = new TcpListener(IPAddress.Loopback, 0);
        listener.Start();
        return ((IPEndPoint)listener.LocalEndpoint).Port;
    }

    internal static void Listen(KestrelServerOptions kestrel, string address, int port, HttpProtocols protocols, X509Certificate2? certificate = null)
    {
        void Configure(ListenOptions o)
        {
            o.Protocols = protocols;
            if (certificate is not null)
            {
                o.UseHttps(certificate);
            }
        }

        if (string.Equals(address, "localhost", StringComparison.OrdinalIgnoreCase))
        {
            kestrel.ListenLocalhost(port, Configure);
        }
        else if (address is "*" or "0.0.0.0" or "::")
        {
            kestrel.ListenAnyIP(port, Configure);
        }
        else
        {
            kestrel.Listen(IPAddress.Parse(address), port, Configure);
        }
    }

    private static void TryAddSingletonTimeProvider(this IServiceCollection services)
    {
        if (!services.Any(d => d.ServiceType == typeof(TimeProvider)))
        {
            services.AddSingleton(TimeProvider.System);
        }
    }
}

/// <summary>SERVING while the registry answers.</summary>
internal sealed class RegistryHealthCheck(ISiteRegistry registry) : IHealthCheck
{
    public Task<HealthCheckResult> CheckHealthAsync(HealthCheckContext context, CancellationToken cancellationToken = default)
    {
        try
        {
            registry.ListSites(null, 1);
            return Task.FromResult(HealthCheckResult.Healthy());
        }
        catch (Exception e) when (e is System.Data.Common.DbException or IOException or InvalidOperationException or TimeoutException)
        {
            return Task.FromResult(HealthCheckResult.Unhealthy("site registry unavailable", e));
        }
    }
}
