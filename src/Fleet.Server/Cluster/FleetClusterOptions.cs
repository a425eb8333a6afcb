namespace Fleet.Server.Cluster;

/// <summary>Where silos of one Fleet cluster find each other.</summary>
public enum ClusteringKind
{
    /// <summary>The embedded single silo (no external service); the site registry is the SQLite file.</summary>
    Localhost,

    /// <summary>Orleans' Redis membership table; the site registry is PostgreSQL (<see cref="FleetClusterOptions.RegistryConnectionString"/>).</summary>
    Redis,

    /// <summary>Orleans' ADO.NET membership table on PostgreSQL (schema applied at start); the site registry in the same database unless set apart.</summary>
    PostgreSql,
}

/// <summary>Cluster settings (configuration section <c>Fleet:Cluster</c>). The default is the embedded single silo.</summary>
public sealed class FleetClusterOptions
{
    public const string SectionName = "Fleet:Cluster";

    public ClusteringKind Clustering { get; set; } = ClusteringKind.Localhost;

    /// <summary>Membership store: a StackExchange.Redis configuration string ("127.0.0.1:6379") or an Npgsql connection string.</summary>
    public string? ConnectionString { get; set; }

    /// <summary>Npgsql connection string of the shared site registry; defaults to <see cref="ConnectionString"/> with PostgreSQL clustering.</summary>
    public string? RegistryConnectionString { get; set; }

    /// <summary>Orleans cluster id: silos with the same id form one cluster (e.g. one per environment).</summary>
    public string ClusterId { get; set; } = "fleet";

    /// <summary>Orleans service id: stays the same across deployments of the same service.</summary>
    public string ServiceId { get; set; } = "fleet";

    /// <summary>IP address other silos reach this one at (the pod IP in Kubernetes). Default 127.0.0.1 (one machine).</summary>
    public string AdvertisedAddress { get; set; } = "127.0.0.1";

    /// <summary>Silo-to-silo probe period and timeout; a silo missing <see cref="MissedProbesLimit"/> probes in a row is suspected.</summary>
    public TimeSpan ProbeTimeout { get; set; } = TimeSpan.FromSeconds(2);

    /// <summary>Missed probes before a silo is suspected (Orleans' default is 3).</summary>
    public int MissedProbesLimit { get; set; } = 3;

    /// <summary>How often poses produced here are sent to other silos' subscribers (latest pose per robot per interval).</summary>
    public TimeSpan RelayInterval { get; set; } = TimeSpan.FromMilliseconds(50);

    /// <summary>How often a silo with subscribers of a site renews its entry in the site's pose feed; the lease is three times this.</summary>
    public TimeSpan FeedRenewal { get; set; } = TimeSpan.FromSeconds(2);

    /// <summary>How long a silo may take to leave the cluster gracefully on SIGTERM (Orleans hands its grains over).</summary>
    public TimeSpan ShutdownTimeout { get; set; } = TimeSpan.FromSeconds(25);

    public bool IsCluster => Clustering != ClusteringKind.Localhost;

    /// <summary>The registry's connection string in cluster mode.</summary>
    public string? EffectiveRegistryConnectionString =>
        !string.IsNullOrWhiteSpace(RegistryConnectionString) ? RegistryConnectionString
        : Clustering == ClusteringKind.PostgreSql ? ConnectionString : null;

    /// <summary>Every configuration mistake, each as one line naming the setting.</summary>
    public List<string> Validate()
    {
        var errors = new List<string>();
        if (!IsCluster)
        {
            return errors;
        }

        if (string.IsNullOrWhiteSpace(ConnectionString))
        {
            errors.Add($"{SectionName}:ConnectionString is required with {SectionName}:Clustering={Clustering}");
        }

        if (string.IsNullOrWhiteSpace(EffectiveRegistryConnectionString))
        {
            errors.Add($"{SectionName}:RegistryConnectionString (PostgreSQL) is required with {SectionName}:Clustering={Clustering}: a cluster cannot share a SQLite file");
        }

        if (!System.Net.IPAddress.TryParse(AdvertisedAddress, out _))
        {
            errors.Add($"{SectionName}:AdvertisedAddress '{AdvertisedAddress}' is not an IP address");
        }

        if (string.IsNullOrWhiteSpace(ClusterId) || string.IsNullOrWhiteSpace(ServiceId))
        {
            errors.Add($"{SectionName}:ClusterId and ServiceId must not be empty");
        }

        if (ProbeTimeout <= TimeSpan.Zero || MissedProbesLimit < 1 || RelayInterval <= TimeSpan.Zero || FeedRenewal <= TimeSpan.Zero)
        {
            errors.Add($"{SectionName}: ProbeTimeout, RelayInterval and FeedRenewal must be positive and MissedProbesLimit at least 1");
        }

        return errors;
    }
}
