namespace Fleet.Server;

/// <summary>Server settings (configuration section <c>Fleet:Server</c>).</summary>
public sealed class FleetServerOptions
{
    public const string SectionName = "Fleet:Server";

    /// <summary>Holds the SQLite site registry (and recordings). Created if missing.</summary>
    public string DataDirectory { get; set; } = "fleet-data";

    /// <summary>Address both ports listen on: "localhost" (loopback only, the default), "*" for every interface, or an IP.</summary>
    public string ListenAddress { get; set; } = "localhost";

    /// <summary>gRPC (HTTP/2 without TLS). 0 picks a free port (see <see cref="FleetServerHost.GetGrpcAddress"/>).</summary>
    public int GrpcPort { get; set; } = 50051;

    /// <summary>Internal HTTP/1.1 port serving only the Prometheus scrape endpoint /metrics; 0 picks a free port, a negative value disables it.</summary>
    public int MetricsPort { get; set; } = 9464;

    /// <summary>Orleans silo-to-silo port of the embedded single silo.</summary>
    public int SiloPort { get; set; } = 11111;

    /// <summary>Orleans client gateway port (for external Orleans clients; the gRPC services call grains in-process).</summary>
    public int GatewayPort { get; set; } = 30000;

    /// <summary>Robots with a pending update that a pose subscriber may hold before the oldest is evicted.</summary>
    public int SubscriberQueueCapacity { get; set; } = 4096;

    /// <summary>Poses per WatchPoses message (keeps messages under the large-object threshold).</summary>
    public int MaxPosesPerMessage { get; set; } = 100;

    /// <summary>Largest accepted request message (bias models are uploaded in one message).</summary>
    public int MaxReceiveMessageBytes { get; set; } = 16 * 1024 * 1024;

    /// <summary>Largest response message.</summary>
    public int MaxSendMessageBytes { get; set; } = 16 * 1024 * 1024;

    /// <summary>When set, every ingested batch is recorded raw under this directory (see <see cref="Recording.IngestRecorder"/>).</summary>
    public string? RecordingDirectory { get; set; }

    /// <summary>
    /// Benchmark baseline only: ingest acknowledges every sample as accepted without running any filter, to measure
    /// the transport's own cost over the same gRPC path.
    /// </summary>
    public bool NoopIngest { get; set; }

    /// <summary>Attach robot ids to measurement counters (one series per robot: only for small fleets).</summary>
    public bool RobotMetricLabels { get; set; }
}
