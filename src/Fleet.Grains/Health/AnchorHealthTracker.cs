using System.Collections.Concurrent;
using System.Diagnostics.Metrics;
using System.Globalization;
using Fleet.Grains.Telemetry;
using MathNet.Numerics.Distributions;

namespace Fleet.Grains.Health;

/// <summary>Why an anchor is flagged (mirrors fleet.v1.AnchorHealthFlag).</summary>
public enum AnchorFlag
{
    Silent = 1,
    Displaced = 2,
    NlosProne = 3,
}

/// <summary>One raised flag and the evidence for it.</summary>
public readonly record struct AnchorFinding(AnchorFlag Flag, string Reason);

/// <summary>
/// Recent health of one anchor: rate (1/s of site time), mean NIS of used samples, rejection ratio, last heard (wall
/// clock) and the flags raised.
/// </summary>
public sealed record AnchorHealthReading(
    string AnchorId, double MeasurementsPerSecond, double MeanNormalizedResidual, double RejectionRatio, DateTimeOffset? LastHeard, IReadOnlyList<AnchorFinding> Findings);

/// <summary>
/// One robot's tallies for one anchor since its last push. Scores are the signed standardised prior innovations
/// s = (z − h)/√S of the TDOAs involving the anchor, oriented so positive means the anchor's path measured long
/// (+s when it is anchor b of ddiff = |p − b| − |p − a|, −s when it is anchor a).
/// </summary>
public struct AnchorTally
{
    public int Used;
    public int Rejected;
    public double NisSum;
    public int NisCount;

    /// <summary>Σ min(s², <see cref="AnchorHealthTracker.ScoreClip"/>): one gross outlier cannot dominate the mean.</summary>
    public double ScoreSquareSum;
    public int ScoreCount;

    /// <summary>Scores beyond the ±<see cref="AnchorHealthTracker.OutlierScore"/> gate, long side and short side.</summary>
    public int LongOutliers;
    public int ShortOutliers;

    public readonly int Total => Used + Rejected;

    /// <summary>Adds one TDOA's standardised innovation, oriented for this anchor.</summary>
    public void AddScore(double orientedScore)
    {
        if (!double.IsFinite(orientedScore))
        {
            return;
        }

        ScoreSquareSum += Math.Min(orientedScore * orientedScore, AnchorHealthTracker.ScoreClip);
        ScoreCount++;
        if (orientedScore > AnchorHealthTracker.OutlierScore)
        {
            LongOutliers++;
        }
        else if (orientedScore < -AnchorHealthTracker.OutlierScore)
        {
            ShortOutliers++;
        }
    }
}

/// <summary>
/// Per-silo, per-anchor statistics and health flags. Robot grains push their tallies at most once a second (one short
/// lock per site). Time is the site clock (the newest sample time any robot reported), so detection times are in data
/// seconds whatever the ingest speed. Statistics cover two consecutive windows of <see cref="WindowSeconds"/>, i.e.
/// the last 10–20 s.
/// <list type="bullet">
/// <item>SILENT: no measurement for <see cref="SilentAfterSeconds"/> while the site's robots measured others.</item>
/// <item>DISPLACED: the mean clipped s² of at least <see cref="MinSamples"/> measurements exceeds both the χ²(n)/n
/// quantile at 1 − <see cref="FalseAlarmProbability"/> (what n squared standard-normal scores reach by chance) and
/// <see cref="DisplacedRelativeLimit"/> × the site's median anchor, and the outliers are not mostly long. The relative
/// limit carries the test: real residuals are not exactly normal (ranging bias, multipath), so every anchor of a site
/// sits above 1 by a similar amount and only the odd one out is flagged.</item>
/// <item>NLOS_PRONE: more than <see cref="NlosMinOutlierFraction"/> (and <see cref="RelativeLimit"/> × the site's
/// median) of its measurements are outliers, at least <see cref="NlosMinLongShare"/> of them long (blocked paths
/// only ever add length), with the Wilson lower bound at the same false-alarm probability above the site median.</item>
/// </list>
/// A fault is therefore flagged within <see cref="DetectionBoundSeconds"/> of site time once robots measure the anchor.
/// </summary>
public sealed class AnchorHealthTracker
{
    public const double WindowSeconds = 10;
    public const double SilentAfterSeconds = 10;
    public const int MinSamples = 100;
    public const double FalseAlarmProbability = 0.001;
    public const double RelativeLimit = 3;

    /// <summary>
    /// Calibrated on the simulated Harbor Point DC sites: a 0.5 m move of one anchor raised its mean clipped s² to
    /// about 2.1× the site median, while healthy anchors stayed within 1.2× (see AnchorHealthTests).
    /// </summary>
    public const double DisplacedRelativeLimit = 1.75;
    public const double NlosMinOutlierFraction = 0.1;
    public const double NlosMinLongShare = 0.75;

    /// <summary>|s| beyond which a measurement counts as an outlier: the two-sided 0.1 % normal quantile, 3.29.</summary>
    public static readonly double OutlierScore = Normal.InvCDF(0, 1, 1 - (FalseAlarmProbability / 2));

    /// <summary>Clip of s² (10 σ).</summary>
    public const double ScoreClip = 100;

    /// <summary>Worst case from a fault's start to its flag: a full two-window span plus a one-second push.</summary>
    public const double DetectionBoundSeconds = (2 * WindowSeconds) + 1;

    private static readonly double WilsonZ = Normal.InvCDF(0, 1, 1 - FalseAlarmProbability);

    private readonly ConcurrentDictionary<string, SiteStats> _sites = new(StringComparer.Ordinal);
    private readonly TimeProvider _time;

    public AnchorHealthTracker(FleetInstruments instruments, TimeProvider time)
    {
        _time = time;
        instruments.ObserveAnchors(Observe);
        instruments.ObserveAnchorFlags(ObserveFlags);
    }

    /// <summary>
    /// Adds one robot's tallies, indexed like <paramref name="anchorIds"/>, covering samples up to
    /// <paramref name="siteTime"/> (s, site clock). Every listed anchor becomes known to the site, heard or not.
    /// </summary>
    public void Record(string siteId, IReadOnlyList<string> anchorIds, ReadOnlySpan<AnchorTally> tallies, double siteTime)
    {
        var site = _sites.GetOrAdd(siteId, static _ => new SiteStats());
        var now = _time.GetUtcNow();
        lock (site)
        {
            if (double.IsFinite(siteTime) && (double.IsNaN(site.Clock) || siteTime > site.Clock))
            {
                // A single wild timestamp must not age every anchor at once: the clock moves at most a window per push.
                site.Clock = double.IsNaN(site.Clock) ? siteTime : Math.Min(siteTime, site.Clock + WindowSeconds);
            }

            if (double.IsNaN(site.Clock))
            {
                return;
            }

            for (var i = 0; i < anchorIds.Count; i++)
            {
                if (!site.Anchors.TryGetValue(anchorIds[i], out var stats))
                {
                    stats = new AnchorStats(site.Clock);
                    site.Anchors.Add(anchorIds[i], stats);
                }

                if (tallies[i].Total > 0)
                {
                    stats.Add(site.Clock, tallies[i], now);
                }
            }
        }
    }

    /// <summary>Readings for <paramref name="anchorIds"/> in that order (anchors never heard read zero).</summary>
    public List<AnchorHealthReading> Read(string siteId, IReadOnlyList<string> anchorIds)
    {
        var readings = new List<AnchorHealthReading>(anchorIds.Count);
        _sites.TryGetValue(siteId, out var site);
        if (site is null)
        {
            readings.AddRange(anchorIds.Select(id => new AnchorHealthReading(id, 0, 0, 0, null, [])));
            return readings;
        }

        lock (site)
        {
            var evaluation = Evaluate(site);
            foreach (var id in anchorIds)
            {
                readings.Add(evaluation.TryGetValue(id, out var reading) ? reading : new AnchorHealthReading(id, 0, 0, 0, null, []));
            }
        }

        return readings;
    }

    private static Dictionary<string, AnchorHealthReading> Evaluate(SiteStats site)
    {
        var sums = new Dictionary<string, Sums>(site.Anchors.Count, StringComparer.Ordinal);
        foreach (var (id, stats) in site.Anchors)
        {
            sums[id] = stats.Sum(site.Clock);
        }

        var scored = sums.Values.Where(s => s.ScoreCount >= MinSamples).ToList();
        var medianScore = Median(scored.Select(s => s.MeanScoreSquare));
        var medianOutliers = Median(scored.Select(s => s.OutlierFraction));

        var result = new Dictionary<string, AnchorHealthReading>(sums.Count, StringComparer.Ordinal);
        foreach (var (id, stats) in site.Anchors)
        {
            var s = sums[id];
            var findings = new List<AnchorFinding>();
            var quiet = site.Clock - (double.IsNaN(stats.LastHeardSiteTime) ? stats.KnownSince : Math.Max(stats.LastHeardSiteTime, stats.KnownSince));
            if (quiet >= SilentAfterSeconds)
            {
                findings.Add(new AnchorFinding(AnchorFlag.Silent, Invariant(
                    $"no measurement for {quiet:F0} s of site time while the site's robots measured other anchors (limit {SilentAfterSeconds:F0} s)")));
            }
            else if (s.ScoreCount >= MinSamples)
            {
                var outliers = s.LongOutliers + s.ShortOutliers;
                var longShare = outliers > 0 ? (double)s.LongOutliers / outliers : 0;
                var fraction = s.OutlierFraction;
                var wilsonLow = WilsonLowerBound(outliers, s.ScoreCount, WilsonZ);
                var nlosLimit = Math.Max(NlosMinOutlierFraction, RelativeLimit * medianOutliers);
                var chance = ChiSquared.InvCDF(s.ScoreCount, 1 - FalseAlarmProbability) / s.ScoreCount;
                var displacedLimit = Math.Max(chance, DisplacedRelativeLimit * Math.Max(1, medianScore));
                if (fraction > nlosLimit && longShare >= NlosMinLongShare && wilsonLow > medianOutliers)
                {
                    findings.Add(new AnchorFinding(AnchorFlag.NlosProne, Invariant(
                        $"{fraction:P0} of {s.ScoreCount} measurements are outliers beyond {OutlierScore:F2} sigma, {longShare:P0} of them long (limit {nlosLimit:P0}; site median {medianOutliers:P0})")));
                }
                else if (s.MeanScoreSquare > displacedLimit && longShare < NlosMinLongShare)
                {
                    findings.Add(new AnchorFinding(AnchorFlag.Displaced, Invariant(
                        $"mean squared standardised residual {s.MeanScoreSquare:F1} over {s.ScoreCount} measurements (limit {displacedLimit:F1}; site median {medianScore:F1}); outliers {longShare:P0} long, {1 - longShare:P0} short: the anchor moved or its map entry no longer fits")));
                }
            }

            var span = Math.Max(1.0, site.Clock - s.Start);
            var total = s.Used + s.Rejected;
            result[id] = new AnchorHealthReading(id, total / span, s.NisCount > 0 ? s.NisSum / s.NisCount : 0, total > 0 ? (double)s.Rejected / total : 0,
                stats.LastHeardWall, findings);
        }

        return result;
    }

    private static double WilsonLowerBound(long successes, long n, double z)
    {
        if (n == 0)
        {
            return 0;
        }

        var p = (double)successes / n;
        var z2 = z * z;
        return ((p + (z2 / (2 * n))) - (z * Math.Sqrt(((p * (1 - p)) + (z2 / (4 * n))) / n))) / (1 + (z2 / n));
    }

    private static double Median(IEnumerable<double> values)
    {
        var sorted = values.Order().ToArray();
        return sorted.Length == 0 ? 0 : sorted.Length % 2 == 1 ? sorted[sorted.Length / 2] : 0.5 * (sorted[(sorted.Length / 2) - 1] + sorted[sorted.Length / 2]);
    }

    private static string Invariant(FormattableString text) => text.ToString(CultureInfo.InvariantCulture);

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

    private IEnumerable<Measurement<int>> ObserveFlags()
    {
        var list = new List<Measurement<int>>();
        foreach (var (siteId, site) in _sites)
        {
            lock (site)
            {
                foreach (var (anchorId, reading) in Evaluate(site))
                {
                    foreach (var finding in reading.Findings)
                    {
                        list.Add(new Measurement<int>(1, new(FleetInstrumentNames.Site, siteId), new(FleetInstrumentNames.Anchor, anchorId),
                            new(FleetInstrumentNames.AnchorFlag, FlagName(finding.Flag))));
                    }
                }
            }
        }

        return list;
    }

    public static string FlagName(AnchorFlag flag) => flag switch
    {
        AnchorFlag.Silent => "silent",
        AnchorFlag.Displaced => "displaced",
        AnchorFlag.NlosProne => "nlos_prone",
        _ => "unknown",
    };

    private sealed class SiteStats
    {
        public Dictionary<string, AnchorStats> Anchors { get; } = new(StringComparer.Ordinal);

        /// <summary>Newest sample time reported for the site (s, site clock); NaN before the first report.</summary>
        public double Clock { get; set; } = double.NaN;
    }

    private readonly record struct Sums(double Start, long Used, long Rejected, double NisSum, long NisCount, double ScoreSquareSum, long ScoreCount, long LongOutliers, long ShortOutliers)
    {
        public double MeanScoreSquare => ScoreCount > 0 ? ScoreSquareSum / ScoreCount : 0;

        public double OutlierFraction => ScoreCount > 0 ? (double)(LongOutliers + ShortOutliers) / ScoreCount : 0;
    }

    private sealed class AnchorStats(double knownSince)
    {
        private Window _current = new(knownSince);
        private Window? _previous;

        public double KnownSince { get; } = knownSince;

        public double LastHeardSiteTime { get; private set; } = double.NaN;

        public DateTimeOffset? LastHeardWall { get; private set; }

        public long TotalUsed { get; private set; }

        public long TotalRejected { get; private set; }

        public void Add(double clock, in AnchorTally tally, DateTimeOffset now)
        {
            Roll(clock);
            _current.Add(tally);
            TotalUsed += tally.Used;
            TotalRejected += tally.Rejected;
            LastHeardSiteTime = clock;
            LastHeardWall = now;
        }

        public Sums Sum(double clock)
        {
            Roll(clock);
            var p = _previous ?? new Window(_current.Start);
            var c = _current;
            return new Sums(_previous?.Start ?? c.Start, c.Used + p.Used, c.Rejected + p.Rejected, c.NisSum + p.NisSum, c.NisCount + p.NisCount,
                c.ScoreSquareSum + p.ScoreSquareSum, c.ScoreCount + p.ScoreCount, c.LongOutliers + p.LongOutliers, c.ShortOutliers + p.ShortOutliers);
        }

        private void Roll(double clock)
        {
            var age = clock - _current.Start;
            if (!(age >= WindowSeconds))
            {
                return;
            }

            // One full window old: it becomes the previous one; older than two windows: both are stale.
            _previous = age < 2 * WindowSeconds ? _current : null;
            _current = new Window(_previous is null ? clock : _current.Start + WindowSeconds);
        }
    }

    private sealed class Window(double start)
    {
        public double Start { get; } = start;

        public long Used { get; private set; }

        public long Rejected { get; private set; }

        public double NisSum { get; private set; }

        public long NisCount { get; private set; }

        public double ScoreSquareSum { get; private set; }

        public long ScoreCount { get; private set; }

        public long LongOutliers { get; private set; }

        public long ShortOutliers { get; private set; }

        public void Add(in AnchorTally t)
        {
            Used += t.Used;
            Rejected += t.Rejected;
            NisSum += t.NisSum;
            NisCount += t.NisCount;
            ScoreSquareSum += t.ScoreSquareSum;
            ScoreCount += t.ScoreCount;
            LongOutliers += t.LongOutliers;
            ShortOutliers += t.ShortOutliers;
        }
    }
}
