using System.Buffers;
using System.Text.Json;
using Fleet.Estimation.Geometry;
using Fleet.Grains;
using Fleet.Grains.Health;
using Fleet.Grains.Registry;
using Fleet.Grains.Streaming;
using Microsoft.Extensions.Options;

namespace Fleet.Server.LiveView;

/// <summary>
/// Server-sent events for one open live page. Subscribes to the silo's <see cref="PoseHub"/> like WatchPoses does
/// (a bounded latest-per-robot queue: ingest never waits for a page, a slow page only loses intermediate poses),
/// and every 1/<see cref="LiveViewOptions.UpdateRateHz"/> s sends one <c>poses</c> event with every robot that
/// moved since the last one. Once a second it sends <c>anchors</c> (per-anchor rate and rejection ratio of the
/// last 10–20 s). Each pose carries its 1-σ horizontal covariance ellipse, computed here so the page only draws.
/// </summary>
internal sealed class LiveViewEventStream(
    PoseHub hub,
    AnchorHealthTracker anchorHealth,
    ISiteRegistry registry,
    TimeProvider time,
    IOptions<LiveViewOptions> options,
    IOptions<FleetServerOptions> serverOptions)
{
    private const int AnchorListRefreshEvents = 10;
    private static readonly TimeSpan KeepAlive = TimeSpan.FromSeconds(15);

    public async Task RunAsync(HttpContext context, string siteId, CancellationToken cancellationToken)
    {
        var response = context.Response;
        response.ContentType = "text/event-stream";
        response.Headers.CacheControl = "no-cache";
        // Tell reverse proxies not to buffer the stream.
        response.Headers["X-Accel-Buffering"] = "no";
        context.Features.Get<Microsoft.AspNetCore.Http.Features.IHttpResponseBodyFeature>()?.DisableBuffering();

        var rate = Math.Clamp(options.Value.UpdateRateHz, 0.5, 60);
        var ticksPerSecond = (int)Math.Max(1, Math.Round(rate));
        using var subscription = hub.Subscribe(new PoseFilter { SiteId = siteId }, serverOptions.Value.SubscriberQueueCapacity, time);
        foreach (var pose in hub.LatestOfSite(siteId))
        {
            subscription.Offer(pose);
        }

        var buffer = new ArrayBufferWriter<byte>(64 * 1024);
        var poses = new List<PoseSnapshot>(256);
        IReadOnlyList<string> anchorIds = [];
        var anchorMapVersion = -1;
        var tick = 0L;
        var anchorEvents = 0L;
        var lastWrite = time.GetTimestamp();
        await WriteRawAsync(response, "retry: 2000\n\n"u8.ToArray(), cancellationToken);

        using var timer = new PeriodicTimer(TimeSpan.FromSeconds(1 / rate), time);
        try
        {
            do
            {
                buffer.Clear();
                poses.Clear();
                subscription.Drain(poses, int.MaxValue);
                if (poses.Count > 0)
                {
                    WriteEvent(buffer, "poses", json => WritePoses(json, poses, subscription.Dropped));
                }

                if (tick++ % ticksPerSecond == 0)
                {
                    // Re-read the anchor list every 10 s so a new anchor-map version shows up.
                    if (anchorEvents++ % AnchorListRefreshEvents == 0)
                    {
                        var site = registry.GetSite(siteId);
                        if (site is not null && site.AnchorMapVersion != anchorMapVersion)
                        {
                            anchorMapVersion = site.AnchorMapVersion;
                            anchorIds = registry.GetAnchorMap(siteId, anchorMapVersion)?.Anchors.Select(a => a.Id).ToArray() ?? [];
                        }
                    }

                    var readings = anchorHealth.Read(siteId, anchorIds);
                    WriteEvent(buffer, "anchors", json => WriteAnchors(json, readings, anchorMapVersion));
                }

                if (buffer.WrittenCount == 0 && time.GetElapsedTime(lastWrite) >= KeepAlive)
                {
                    buffer.Write(": keep-alive\n\n"u8);
                }

                if (buffer.WrittenCount > 0)
                {
                    // The only writer of this response; a slow page delays only its own next batch.
                    await response.Body.WriteAsync(buffer.WrittenMemory, cancellationToken);
                    await response.Body.FlushAsync(cancellationToken);
                    lastWrite = time.GetTimestamp();
                }
            }
            while (await timer.WaitForNextTickAsync(cancellationToken));
        }
        catch (OperationCanceledException) when (cancellationToken.IsCancellationRequested)
        {
            // The page was closed or the server is stopping.
        }
        catch (IOException) when (context.RequestAborted.IsCancellationRequested)
        {
            // The connection dropped mid-write.
        }
    }

    /// <summary>Horizontal (x, y) 1-σ ellipse of a pose's 7×7 row-major covariance (indices 0, 1 and 8).</summary>
    internal static CovarianceEllipse HorizontalEllipse(PoseSnapshot pose) =>
        pose.Covariance.Length >= 9
            ? CovarianceEllipse.FromCovariance(pose.Covariance[0], 0.5 * (pose.Covariance[1] + pose.Covariance[7]), pose.Covariance[8])
            : new CovarianceEllipse(double.NaN, double.NaN, double.NaN);

    private static void WritePoses(Utf8JsonWriter json, List<PoseSnapshot> poses, long dropped)
    {
        json.WriteStartObject();
        json.WriteNumber("dropped", dropped);
        json.WriteStartArray("robots");
        foreach (var pose in poses)
        {
            var ellipse = HorizontalEllipse(pose);
            json.WriteStartObject();
            json.WriteString("id", pose.RobotId);
            Number(json, "t", pose.Time, 3);
            Number(json, "x", pose.Position.X, 3);
            Number(json, "y", pose.Position.Y, 3);
            Number(json, "yaw", pose.Yaw, 3);
            Number(json, "speed", Math.Sqrt((pose.Velocity.X * pose.Velocity.X) + (pose.Velocity.Y * pose.Velocity.Y)), 2);
            json.WriteString("state", StateName(pose.State));
            Number(json, "rejected", pose.RecentRejectionRatio, 3);
            Number(json, "a", ellipse.SemiMajor, 4);
            Number(json, "b", ellipse.SemiMinor, 4);
            Number(json, "angle", ellipse.AngleRadians, 4);
            json.WriteEndObject();
        }

        json.WriteEndArray();
        json.WriteEndObject();
    }

    private static void WriteAnchors(Utf8JsonWriter json, List<AnchorHealthReading> readings, int anchorMapVersion)
    {
        json.WriteStartObject();
        json.WriteNumber("anchorMapVersion", anchorMapVersion);
        json.WriteStartArray("anchors");
        foreach (var r in readings)
        {
            json.WriteStartObject();
            json.WriteString("id", r.AnchorId);
            Number(json, "rate", r.MeasurementsPerSecond, 1);
            Number(json, "rejected", r.RejectionRatio, 4);
            Number(json, "nis", r.MeanNormalizedResidual, 2);
            json.WriteBoolean("heard", r.LastHeard is not null);
            json.WriteEndObject();
        }

        json.WriteEndArray();
        json.WriteEndObject();
    }

    internal static string StateName(RobotTrackState state) => state switch
    {
        RobotTrackState.Acquiring => "acquiring",
        RobotTrackState.Locked => "locked",
        RobotTrackState.Uncertain => "uncertain",
        RobotTrackState.Lost => "lost",
        _ => "unknown",
    };

    private static void WriteEvent(ArrayBufferWriter<byte> buffer, string name, Action<Utf8JsonWriter> body)
    {
        buffer.Write("event: "u8);
        buffer.Write(System.Text.Encoding.UTF8.GetBytes(name));
        buffer.Write("\ndata: "u8);
        // Compact JSON has no raw newlines (they are escaped in strings), so one data line carries it.
        using (var json = new Utf8JsonWriter(buffer))
        {
            body(json);
        }

        buffer.Write("\n\n"u8);
    }

    private static void Number(Utf8JsonWriter json, string name, double value, int digits)
    {
        if (double.IsFinite(value))
        {
            json.WriteNumber(name, Math.Round(value, digits));
        }
        else
        {
            json.WriteNull(name);
        }
    }

    private static async Task WriteRawAsync(HttpResponse response, byte[] bytes, CancellationToken cancellationToken)
    {
        await response.Body.WriteAsync(bytes, cancellationToken);
        await response.Body.FlushAsync(cancellationToken);
    }
}
