using System.Collections.Concurrent;
using System.Diagnostics.Metrics;
using Fleet.Grains.Telemetry;

namespace Fleet.Grains.Streaming;

/// <summary>Which poses a subscriber wants: one site, optionally a robot list and/or a zone (site frame, m).</summary>
public sealed class PoseFilter
{
    public required string SiteId { get; init; }

    /// <summary>Null or empty: every robot.</summary>
    public IReadOnlySet<string>? RobotIds { get; init; }

    public Vec3? ZoneMin { get; init; }

    public Vec3? ZoneMax { get; init; }

    /// <summary>At most this many updates per second per robot; 0: no cap.</summary>
    public double MaxRatePerRobotHz { get; init; }

    public bool Matches(PoseSnapshot pose)
    {
        if (!string.Equals(pose.SiteId, SiteId, StringComparison.Ordinal))
        {
            return false;
        }

        if (RobotIds is { Count: > 0 } && !RobotIds.Contains(pose.RobotId))
        {
            return false;
        }

        if (ZoneMin is { } lo && ZoneMax is { } hi)
        {
            var p = pose.Position;
            return p.X >= lo.X && p.X <= hi.X && p.Y >= lo.Y && p.Y <= hi.Y && p.Z >= lo.Z && p.Z <= hi.Z;
        }

        return true;
    }
}

/// <summary>
/// One per silo: robot grains publish each new pose here, and every open pose stream holds a
/// <see cref="PoseSubscription"/>. Publishing never blocks on subscribers: it only replaces an entry in each
/// matching subscriber's bounded queue. Also keeps the latest pose of each robot loaded on this silo. In a cluster,
/// <see cref="Outbound"/> hands each local pose to the cross-silo relay and <see cref="Deliver"/> takes poses relayed
/// from other silos.
/// </summary>
public sealed class PoseHub
{
    /// <summary>Set in cluster mode: takes every locally produced pose for other silos (must never block).</summary>
    public Action<PoseSnapshot>? Outbound { get; set; }

    /// <summary>Raised with the site id when a subscription opens (the relay registers the silo for that site).</summary>
    public event Action<string>? SubscriptionOpened;

    private readonly ConcurrentDictionary<(string SiteId, string RobotId), PoseSnapshot> _latest = new();
    private readonly Lock _gate = new();
    private PoseSubscription[] _subscriptions = [];

    private readonly FleetInstruments _instruments;

    public PoseHub(FleetInstruments instruments)
    {
        _instruments = instruments;
        // Robots by the tracking state of their latest pose, per site (this silo's robots; a cluster's silos add up).
        _instruments.Meter.CreateObservableGauge(FleetInstrumentNames.RobotsTracking, ObserveTracking, "{robot}",
            "Loaded robots by tracking state of their latest pose.");
    }

    public int SubscriberCount => Volatile.Read(ref _subscriptions).Length;

    public void Publish(PoseSnapshot pose)
    {
        _latest[(pose.SiteId, pose.RobotId)] = pose;
        _instruments.PosePublished(pose.SiteId);
        Outbound?.Invoke(pose);
        Offer(pose);
    }

    /// <summary>A pose produced on another silo: offered to this silo's subscribers only (not counted as published here).</summary>
    public void Deliver(PoseSnapshot pose) => Offer(pose);

    /// <summary>Sites with at least one open subscription on this silo.</summary>
    public HashSet<string> SubscribedSites()
    {
        var sites = new HashSet<string>(StringComparer.Ordinal);
        foreach (var subscription in Volatile.Read(ref _subscriptions))
        {
            sites.Add(subscription.Filter.SiteId);
        }

        return sites;
    }

    private void Offer(PoseSnapshot pose)
    {
        var subscriptions = Volatile.Read(ref _subscriptions);
        foreach (var subscription in subscriptions)
        {
            if (subscription.Filter.Matches(pose))
            {
                subscription.Offer(pose);
            }
        }
    }

    private IEnumerable<Measurement<int>> ObserveTracking()
    {
        var counts = new Dictionary<(string Site, RobotTrackState State), int>();
        foreach (var (key, pose) in _latest)
        {
            counts[(key.SiteId, pose.State)] = counts.GetValueOrDefault((key.SiteId, pose.State)) + 1;
        }

        var measurements = new List<Measurement<int>>(counts.Count);
        foreach (var ((site, state), count) in counts)
        {
            measurements.Add(new Measurement<int>(count,
                new KeyValuePair<string, object?>(FleetInstrumentNames.Site, site),
                new KeyValuePair<string, object?>(FleetInstrumentNames.TrackingState, state.ToString().ToLowerInvariant())));
        }

        return measurements;
    }

    /// <summary>Drops the cached pose of a robot whose filter was unloaded.</summary>
    public void Forget(string siteId, string robotId) => _latest.TryRemove((siteId, robotId), out _);

    /// <summary>Latest poses of the site's robots loaded on this silo (unordered).</summary>
    public List<PoseSnapshot> LatestOfSite(string siteId)
    {
        var list = new List<PoseSnapshot>();
        foreach (var (key, pose) in _latest)
        {
            if (string.Equals(key.SiteId, siteId, StringComparison.Ordinal))
            {
                list.Add(pose);
            }
        }

        return list;
    }

    public PoseSnapshot? Latest(string siteId, string robotId) => _latest.TryGetValue((siteId, robotId), out var pose) ? pose : null;

    /// <summary>Opens a subscription holding at most <paramref name="capacity"/> robots' pending poses.</summary>
    public PoseSubscription Subscribe(PoseFilter filter, int capacity, TimeProvider? timeProvider = null)
    {
        var subscription = new PoseSubscription(this, filter, capacity, timeProvider ?? TimeProvider.System);
        lock (_gate)
        {
            _subscriptions = [.. _subscriptions, subscription];
        }

        _instruments.SubscriberOpened(filter.SiteId);
        SubscriptionOpened?.Invoke(filter.SiteId);
        return subscription;
    }

    internal void Unsubscribe(PoseSubscription subscription)
    {
        lock (_gate)
        {
            var index = Array.IndexOf(_subscriptions, subscription);
            if (index < 0)
            {
                return;
            }

            _subscriptions = [.. _subscriptions.AsSpan(0, index), .. _subscriptions.AsSpan(index + 1)];
        }

        _instruments.SubscriberClosed(subscription.Filter.SiteId);
        _instruments.UpdatesDropped(subscription.Filter.SiteId, subscription.TakeUnreportedDrops());
    }

    internal void ReportDrops(PoseSubscription subscription) =>
        _instruments.UpdatesDropped(subscription.Filter.SiteId, subscription.TakeUnreportedDrops());
}
