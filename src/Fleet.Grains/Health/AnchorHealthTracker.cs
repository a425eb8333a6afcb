using System.Collections.Concurrent;
using System.Diagnostics.Metrics;
using Fleet.Grains.Telemetry;

namespace Fleet.Grains.Health;

/// <summary>Recent health of one anchor: rate (1/s), mean NIS of used samples, rejection ratio, last heard (wall clock).</summary>
public sealed record AnchorHealthReading(string AnchorId, double MeasurementsPerSecond, double MeanNormalizedResidual, double RejectionRatio, DateTimeOffset? LastHeard);

/// <summary>
/// Per-silo per-anchor statistics. Robot grains tally their batch per anchor and add it here once per batch
/// (one short lock per site per batch, nothing per sample). Rates use two consecutive windows of
/// <see cref="WindowSeconds"/>, so a reading covers the last 10–20 s. Cumulative counts feed an observable counter.
/// </summary>
public sealed class AnchorHealthTracker
{
    public const double WindowSeconds = 10;

    private readonly ConcurrentDictionary<string, SiteStats> _sites = new(StringComparer.Ordinal);
    private readonly TimeProvider _time;

    public AnchorHealthTracker(FleetInstruments instruments, TimeProvider time)
    {
        _time = time;
        instruments.ObserveAnchors(Observe);
    }

    /// <summary>
    /// Adds one batch's tallies. Arrays are indexed like <paramref name="anchorIds"/>; entries with no samples are skipped.
    /// </summary>
    public void Record(string siteId, IReadOnlyList<string> anchorIds, ReadOnlySpan<int> used, ReadOnlySpan<int> rejected, ReadOnlySpan<double> nisSum, ReadOnlySpan<int> nisCount)
    {
        var site = _sites.GetOrAdd(siteId, static _ => new SiteStats());
        var now = _time.GetUtcNow();
        lock (site)
        {
            for (var i = 0; i < anchorIds.Count; i++)
            {
                if (used[i] + rejected[i] == 0)
                {
                    continue;
                }

                if (!site.Anchors.TryGetValue(anchorIds[i], out var stats))
                {
                    stats = new AnchorStats(now);
                    site.Anchors.Add(anchorIds[i], stats);
                }

                stats.Add(now, used[i], rejected[i], nisSum[i], nisCount[i]);
            }
        }
    }

    /// <summary>Readings for <paramref name="anchorIds"/> in that order (anchors never heard read zero).</summary>
    public List<AnchorHealthReading> Read(string siteId, IReadOnlyList<string> anchorIds)
    {
        var now = _time.GetUtcNow();
        var readings = new List<AnchorHealthReading>(anchorIds.Count);
        _sites.TryGetValue(siteId, out var site);
        foreach (var id in anchorIds)
        {
            AnchorStats? stats = null;
            if (site is not null)
            {
                lock (site)
                {
                    if (site.Anchors.TryGetValue(id, out stats))
                    {
                        readings.Add(stats.Read(id, now));
                        continue;
                    }
                }
            }

            readings.Add(new AnchorHealthReading(id, 0, 0, 0, null));
        }

        return readings;
    }

    private IEnumerable<Measurement<long>> Observe()
    {
        var list = new List<Measurement<long>>();
        foreach (var (siteId, site) in _sites)
        {
            lock (site)
            {
                foreach (var (anchorId, stats) in site.Anchors)
                {
                    list.Add(new Measurement<long>(stats.TotalUsed,
                        new(FleetInstrumentNames.Site, siteId), new(FleetInstrumentNames.Anchor, anchorId), new(FleetInstrumentNames.Outcome, "used")));
                    list.Add(new Measurement<long>(stats.TotalRejected,
                        new(FleetInstrumentNames.Site, siteId), new(FleetInstrumentNames.Anchor, anchorId), new(FleetInstrumentNames.Outcome, "rejected")));
                }
            }
        }

        return list;
    }

    private sealed class SiteStats
    {
        public Dictionary<string, AnchorStats> Anchors { get; } = new(StringComparer.Ordinal);
    }

    private sealed class AnchorStats(DateTimeOffset start)
    {
        private Window _current = new(start);
        private Window? _previous;

        public long TotalUsed { get; private set; }

        public long TotalRejected { get; private set; }

        public DateTimeOffset LastHeard { get; private set; }

        public void Add(DateTimeOffset now, int used, int rejected, double nisSum, int nisCount)
        {
            Roll(now);
            _current.Used += used;
            _current.Rejected += rejected;
            _current.NisSum += nisSum;
            _current.NisCount += nisCount;
            TotalUsed += used;
            TotalRejected += rejected;
            LastHeard = now;
        }

        public AnchorHealthReading Read(string id, DateTimeOffset now)
        {
            Roll(now);
            var start = _previous?.Start ?? _current.Start;
            long used = _current.Used + (_previous?.Used ?? 0);
            long rejected = _current.Rejected + (_previous?.Rejected ?? 0);
            var nis = _current.NisSum + (_previous?.NisSum ?? 0);
            long nisCount = _current.NisCount + (_previous?.NisCount ?? 0);
            var span = Math.Max(1.0, (now - start).TotalSeconds);
            var total = used + rejected;
            return new AnchorHealthReading(id, total / span, nisCount > 0 ? nis / nisCount : 0, total > 0 ? (double)rejected / total : 0, LastHeard);
        }

        private void Roll(DateTimeOffset now)
        {
            var age = (now - _current.Start).TotalSeconds;
            if (age < WindowSeconds)
            {
                return;
            }

            // One full window old: it becomes the previous one; older than two windows: both are stale.
            _previous = age < 2 * WindowSeconds ? _current : null;
            _current = new Window(_previous is null ? now : _current.Start.AddSeconds(WindowSeconds));
        }
    }

    private sealed class Window(DateTimeOffset start)
    {
        public DateTimeOffset Start { get; } = start;

        public long Used { get; set; }

        public long Rejected { get; set; }

        public double NisSum { get; set; }

        public long NisCount { get; set; }
    }
}
