using System.Diagnostics;
using System.Diagnostics.Metrics;

namespace Fleet.Grains.Telemetry;

/// <summary>Instrument and attribute names (OpenTelemetry conventions: dotted lower case, UCUM units, no unit in the name).</summary>
public static class FleetInstrumentNames
{
    public const string MeterName = "Fleet.Server";
    public const string ActivitySourceName = "Fleet.Server";

    // OpenTelemetry RPC semantic conventions (rpc-metrics.md): seconds, advised buckets 5 ms … 10 s.
    public const string RpcServerCallDuration = "rpc.server.call.duration";
    public const string IngestLatency = "fleet.ingest.latency";
    public const string Measurements = "fleet.measurements";
    public const string AnchorMeasurements = "fleet.anchor.measurements";
    public const string AnchorFlagged = "fleet.anchor.flagged";
    public const string ActiveRobots = "fleet.robots.active";
    public const string PoseSubscribers = "fleet.pose.subscribers";
    public const string PoseUpdatesDropped = "fleet.pose.updates.dropped";
    public const string PoseUpdatesPublished = "fleet.pose.updates.published";
    public const string RobotsTracking = "fleet.robots.tracking";
    public const string TrackingState = "fleet.tracking.state";

    public const string RpcSystemName = "rpc.system.name";
    public const string RpcMethod = "rpc.method";
    public const string RpcStatusCode = "rpc.status_code";
    public const string ErrorType = "error.type";
    public const string Site = "fleet.site";
    public const string Robot = "fleet.robot";
    public const string Anchor = "fleet.anchor";
    public const string Outcome = "fleet.outcome";
    public const string Reason = "fleet.rejection.reason";
    public const string AnchorFlag = "fleet.anchor.flag";
}

/// <summary>
/// Every instrument of the server, created once from the host's <see cref="IMeterFactory"/>. Attribute values are
/// bounded (sites, anchors, outcomes, reasons); robot ids are attached only when <see cref="RobotLabels"/> is on.
/// </summary>
public sealed class FleetInstruments
{
    public static readonly ActivitySource ActivitySource = new(FleetInstrumentNames.ActivitySourceName);

    private static readonly string[] OutcomeNames = ["accepted", "down_weighted", "buffered", "rejected"];
    private static readonly string[] ReasonNames =
    [
        "none", "invalid_value", "unknown_site", "no_anchor_map", "unknown_anchor", "same_anchor", "too_late",
        "too_far_in_future", "impossible_value", "outlier_gate", "zero_weight", "not_initialised", "invalid_robot",
        "duplicate",
    ];

    private readonly Counter<long> _measurements;
    private readonly UpDownCounter<long> _activeRobots;
    private readonly UpDownCounter<long> _subscribers;
    private readonly Counter<long> _dropped;
    private readonly Counter<long> _published;

    public FleetInstruments(IMeterFactory meterFactory, bool robotLabels = false)
    {
        RobotLabels = robotLabels;
        Meter = meterFactory.Create(FleetInstrumentNames.MeterName);
        RpcServerCallDuration = Meter.CreateHistogram(FleetInstrumentNames.RpcServerCallDuration, "s",
            "Duration of inbound RPCs (streams: until the stream ends).",
            advice: new InstrumentAdvice<double> { HistogramBucketBoundaries = [0.005, 0.01, 0.025, 0.05, 0.075, 0.1, 0.25, 0.5, 0.75, 1, 2.5, 5, 7.5, 10] });
        IngestLatency = Meter.CreateHistogram(FleetInstrumentNames.IngestLatency, "s",
            "Time from receiving a measurement batch to publishing the robot's updated pose.",
            advice: new InstrumentAdvice<double> { HistogramBucketBoundaries = [0.0001, 0.00025, 0.0005, 0.001, 0.0025, 0.005, 0.0075, 0.01, 0.025, 0.05, 0.1, 0.25, 1] });
        _measurements = Meter.CreateCounter<long>(FleetInstrumentNames.Measurements, "{measurement}",
            "Ingested samples by site, outcome and rejection reason.");
        _activeRobots = Meter.CreateUpDownCounter<long>(FleetInstrumentNames.ActiveRobots, "{robot}", "Robots whose filter is loaded.");
        _subscribers = Meter.CreateUpDownCounter<long>(FleetInstrumentNames.PoseSubscribers, "{subscriber}", "Open pose streams.");
        _dropped = Meter.CreateCounter<long>(FleetInstrumentNames.PoseUpdatesDropped, "{update}",
            "Pose updates a slow subscriber never received (replaced by a newer one or evicted).");
        _published = Meter.CreateCounter<long>(FleetInstrumentNames.PoseUpdatesPublished, "{update}", "Pose updates published by robot filters.");
    }

    public Meter Meter { get; }

    public bool RobotLabels { get; }

    public Histogram<double> RpcServerCallDuration { get; }

    public Histogram<double> IngestLatency { get; }

    /// <summary>Adds one batch's outcome counts; <paramref name="rejectedByReason"/> is indexed by <see cref="SampleRejectionReason"/>.</summary>
    public void RecordMeasurements(string siteId, string? robotId, int accepted, int downWeighted, int buffered, ReadOnlySpan<int> rejectedByReason)
    {
        if (!_measurements.Enabled)
        {
            return;
        }

        Add(siteId, robotId, 0, 0, accepted);
        Add(siteId, robotId, 1, 0, downWeighted);
        Add(siteId, robotId, 2, 0, buffered);
        for (var r = 1; r < rejectedByReason.Length && r < ReasonNames.Length; r++)
        {
            Add(siteId, robotId, 3, r, rejectedByReason[r]);
        }
    }

    public void RobotActivated(string siteId) => _activeRobots.Add(1, new KeyValuePair<string, object?>(FleetInstrumentNames.Site, siteId));

    public void RobotDeactivated(string siteId) => _activeRobots.Add(-1, new KeyValuePair<string, object?>(FleetInstrumentNames.Site, siteId));

    public void SubscriberOpened(string siteId) => _subscribers.Add(1, new KeyValuePair<string, object?>(FleetInstrumentNames.Site, siteId));

    public void SubscriberClosed(string siteId) => _subscribers.Add(-1, new KeyValuePair<string, object?>(FleetInstrumentNames.Site, siteId));

    public void UpdatesDropped(string siteId, long count)
    {
        if (count > 0)
        {
            _dropped.Add(count, new KeyValuePair<string, object?>(FleetInstrumentNames.Site, siteId));
        }
    }

    public void PosePublished(string siteId) => _published.Add(1, new KeyValuePair<string, object?>(FleetInstrumentNames.Site, siteId));

    /// <summary>
    /// Per-anchor cumulative counts as an observable counter (read at collection time, so the hot path pays nothing).
    /// </summary>
    public void ObserveAnchors(Func<IEnumerable<Measurement<long>>> observe) =>
        Meter.CreateObservableCounter(FleetInstrumentNames.AnchorMeasurements, observe, "{measurement}",
            "Samples that involved an anchor, by site, anchor and outcome (used or rejected).");

    /// <summary>1 for every (site, anchor, flag) that is raised now; flags that clear disappear from the next collection.</summary>
    public void ObserveAnchorFlags(Func<IEnumerable<Measurement<int>>> observe) =>
        Meter.CreateObservableGauge(FleetInstrumentNames.AnchorFlagged, observe, "{flag}",
            "Anchors flagged by the health checks, by site, anchor and flag (silent, displaced, nlos_prone).");

    internal static string OutcomeName(int outcome) => OutcomeNames[outcome];

    private void Add(string siteId, string? robotId, int outcome, int reason, int count)
    {
        if (count <= 0)
        {
            return;
        }

        var tags = new TagList
        {
            { FleetInstrumentNames.Site, siteId },
            { FleetInstrumentNames.Outcome, OutcomeNames[outcome] },
            { FleetInstrumentNames.Reason, ReasonNames[reason] },
        };
        if (RobotLabels && robotId is not null)
        {
            tags.Add(FleetInstrumentNames.Robot, robotId);
        }

        _measurements.Add(count, tags);
    }
}
