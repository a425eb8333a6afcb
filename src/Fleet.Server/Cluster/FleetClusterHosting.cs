using System.Net;
using Fleet.Grains.Registry;
using Fleet.Grains.Streaming;
using Fleet.Server.Registry;
using Grpc.AspNetCore.Server;
using Microsoft.Extensions.DependencyInjection.Extensions;
using Microsoft.Extensions.Options;
using Orleans.Configuration;

namespace Fleet.Server.Cluster;

/// <summary>Wiring of cluster mode: clustering provider, shared registry, pose relay (one call each from the server's setup).</summary>
public static class FleetClusterHosting
{
    /// <summary>Reads <c>Fleet:Cluster</c> and refuses a configuration that cannot work, listing every mistake.</summary>
    public static FleetClusterOptions GetFleetClusterOptions(this IConfiguration configuration)
    {
        var cluster = configuration.GetSection(FleetClusterOptions.SectionName).Get<FleetClusterOptions>() ?? new FleetClusterOptions();
        var errors = cluster.Validate();
        return errors.Count == 0 ? cluster : throw new InvalidOperationException("invalid cluster configuration:\n  " + string.Join("\n  ", errors));
    }

    /// <summary>
    /// The site registry (SQLite file for the embedded silo, PostgreSQL in cluster mode) with the robots' last poses,
    /// written about once a second.
    /// </summary>
    public static IServiceCollection AddFleetRegistry(this IServiceCollection services, IConfiguration configuration, FleetServerOptions options)
    {
        var cluster = configuration.GetFleetClusterOptions();
        services.TryAddSingleton(Options.Create(cluster));
        if (cluster.IsCluster)
        {
            services.AddSingleton<ISiteRegistry>(sp => new PostgresSiteRegistry(cluster.EffectiveRegistryConnectionString!, sp.GetRequiredService<TimeProvider>()));
        }
        else
        {
            services.AddSingleton<ISiteRegistry>(sp => new SqliteSiteRegistry(options.DataDirectory, sp.GetRequiredService<TimeProvider>()));
        }

        services.AddSingleton(sp => (IRobotPoseStore)sp.GetRequiredService<ISiteRegistry>());
        services.AddSingleton<RobotPoseLog>();
        services.AddHostedService<RobotPoseFlusher>();
        return services;
    }

    /// <summary>
    /// Localhost clustering for the embedded silo; otherwise Redis or PostgreSQL membership (the Orleans scripts are
    /// applied first), the advertised address, fast failure detection, graceful leave on SIGTERM and the pose relay.
    /// </summary>
    public static ISiloBuilder UseFleetClustering(this ISiloBuilder silo, FleetClusterOptions cluster, FleetServerOptions options)
    {
        if (!cluster.IsCluster)
        {
            silo.UseLocalhostClustering(options.SiloPort, options.GatewayPort, serviceId: "fleet", clusterId: "fleet-local");
            return silo;
        }

        silo.Configure<ClusterOptions>(o =>
        {
            o.ClusterId = cluster.ClusterId;
            o.ServiceId = cluster.ServiceId;
        });
        var advertised = IPAddress.Parse(cluster.AdvertisedAddress);
        silo.ConfigureEndpoints(advertised, options.SiloPort, options.GatewayPort, listenOnAnyHostAddress: !IPAddress.IsLoopback(advertised));
        silo.Configure<ClusterMembershipOptions>(o =>
        {
            o.ProbeTimeout = cluster.ProbeTimeout;
            o.NumMissedProbesLimit = cluster.MissedProbesLimit;
        });
        switch (cluster.Clustering)
        {
            case ClusteringKind.Redis:
                silo.UseRedisClustering(cluster.ConnectionString!);
                break;
            case ClusteringKind.PostgreSql:
                PostgresOrleansSchema.Apply(cluster.ConnectionString!);
                silo.UseAdoNetClustering(o =>
                {
                    o.Invariant = "Npgsql";
                    o.ConnectionString = cluster.ConnectionString;
                });
                break;
        }

        silo.Services.AddFleetPoseRelay(cluster);
        // SIGTERM: the host stops the silo, which leaves the membership table gracefully and hands its grains over.
        silo.Services.Configure<HostOptions>(o => o.ShutdownTimeout = cluster.ShutdownTimeout);
        return silo;
    }

    /// <summary>
    /// The cross-silo pose relay, the gRPC mapping of silo-loss failures to UNAVAILABLE, and random placement: robot
    /// grains are many, small and alike, so spreading them at random balances silos without waiting for load statistics
    /// (the default resource-optimised placement keeps new activations local while the statistics are young).
    /// </summary>
    public static IServiceCollection AddFleetPoseRelay(this IServiceCollection services, FleetClusterOptions cluster)
    {
        services.TryAddSingleton(Options.Create(cluster));
        services.AddSingleton<PlacementStrategy, RandomPlacement>();
        services.AddSingleton<ClusterPoseRelay>();
        services.AddSingleton<ILifecycleParticipant<ISiloLifecycle>>(sp => sp.GetRequiredService<ClusterPoseRelay>());
        services.AddSingleton<SiloLossInterceptor>();
        services.Configure<GrpcServiceOptions>(o => o.Interceptors.Add<SiloLossInterceptor>());
        return services;
    }

}
