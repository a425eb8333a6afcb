namespace Fleet.Server.LiveView;

/// <summary>
/// Settings of the live floor view (configuration section <c>Fleet:LiveView</c>). The view is a read-only web page
/// on its own plain HTTP/1.1 port: browsers cannot speak gRPC's cleartext HTTP/2 (h2c) on the gRPC port, and the
/// metrics port stays internal. It listens on <see cref="FleetServerOptions.ListenAddress"/> (loopback by default).
/// </summary>
public sealed class LiveViewOptions
{
    public const string SectionName = "Fleet:LiveView";

    /// <summary>Serve the live view at all.</summary>
    public bool Enabled { get; set; } = true;

    /// <summary>HTTP/1.1 port of the live view; 0 picks a free port (read it back with <see cref="LiveViewEndpoints.GetAddress"/>), a negative value turns the view off.</summary>
    public int Port { get; set; } = 8080;

    /// <summary>Pose batches per second sent to each open page (latest pose per robot; older ones are dropped, never queued).</summary>
    public double UpdateRateHz { get; set; } = 10;

    /// <summary>Length of the trail drawn behind each robot (s of wall-clock time).</summary>
    public double TrailSeconds { get; set; } = 5;

    /// <summary>
    /// Site files (JSON/YAML, README "Site file") by site id, e.g. <c>Fleet:LiveView:SiteFiles:harbor-point=site.json</c>.
    /// Only their racks and floor extent are used; anchors always come from the site's active anchor map.
    /// </summary>
    public Dictionary<string, string> SiteFiles { get; set; } = new(StringComparer.Ordinal);

    /// <summary>Tag height (m, site z) of the DOP/CRLB map; unset: the median tag height of the site's registered robots, else 0.5 m.</summary>
    public double? TagHeightMetres { get; set; }

    /// <summary>Cell size of the DOP/CRLB map (m).</summary>
    public double GridStepMetres { get; set; } = 0.5;

    /// <summary>Single-link (TOA) range noise 1-σ (m) behind the CRLB map; DOP does not depend on it.</summary>
    public double SigmaToaMetres { get; set; } = 0.1;
}
