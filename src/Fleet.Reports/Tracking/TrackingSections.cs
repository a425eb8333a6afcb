using Fleet.Estimation.Evaluation;
using Fleet.Reports.Rendering;

namespace Fleet.Reports.Tracking;

/// <summary>One filter configuration's replay of a log: a short label ("A"), what it was, and the scored result.</summary>
public sealed record TrackingRun(string Label, string Description, EvaluationResult Result);

/// <summary>Tracking-accuracy figures and tables shared by the replay and site reports.</summary>
public static class TrackingSections
{
    /// <summary>Most robots drawn as small multiples of error against time; the rest are in the tables only.</summary>
    public const int MaxRobotPanels = 24;

    /// <summary>
    /// Mean of <paramref name="values"/> in consecutive time bins of <paramref name="binSeconds"/> starting at the
    /// first time, as (bin centre time s, mean). A run of empty bins (robot not tracked) becomes one NaN point, which
    /// breaks the drawn line instead of bridging the gap.
    /// </summary>
    public static IReadOnlyList<(double X, double Y)> BinnedMean(IReadOnlyList<double> times, IReadOnlyList<double> values, double binSeconds)
    {
        var n = Math.Min(times.Count, values.Count);
        if (n == 0 || !(binSeconds > 0))
        {
            return [];
        }

        var t0 = double.PositiveInfinity;
        var t1 = double.NegativeInfinity;
        for (var i = 0; i < n; i++)
        {
            if (double.IsFinite(times[i]))
            {
                t0 = Math.Min(t0, times[i]);
                t1 = Math.Max(t1, times[i]);
            }
        }

        if (!double.IsFinite(t0))
        {
            return [];
        }

        var bins = (int)Math.Floor((t1 - t0) / binSeconds) + 1;
        var sum = new double[bins];
        var count = new int[bins];
        for (var i = 0; i < n; i++)
        {
            if (double.IsFinite(times[i]) && double.IsFinite(values[i]))
            {
                var k = Math.Min(bins - 1, (int)Math.Floor((times[i] - t0) / binSeconds));
                sum[k] += values[i];
                count[k]++;
            }
        }

        var points = new List<(double X, double Y)>();
        for (var k = 0; k < bins; k++)
        {
            if (count[k] > 0)
            {
                points.Add((t0 + ((k + 0.5) * binSeconds), sum[k] / count[k]));
            }
            else if (points.Count > 0 && !double.IsNaN(points[^1].Y))
            {
                points.Add((t0 + ((k + 0.5) * binSeconds), double.NaN));
            }
        }

        return points;
    }

    /// <summary>A nice bin width (s) giving about <paramref name="targetBins"/> bins over <paramref name="durationSeconds"/>.</summary>
    public static double BinWidth(double durationSeconds, int targetBins = 150) =>
        Math.Max(0.1, Axis.NiceStep(Math.Max(durationSeconds, 0.1) / targetBins));

    /// <summary>Headline boxes for each run: horizontal RMSE, p95, tracked share, rejection share.</summary>
    public static void AddKpis(HtmlReport doc, IReadOnlyList<TrackingRun> runs)
    {
        var items = new List<(string, string)>();
        foreach (var r in runs)
        {
            var o = r.Result.Overall;
            var prefix = runs.Count > 1 ? r.Label + ": " : string.Empty;
            items.Add((Format.Number(o.RmseHorizontal) + " m", prefix + "horizontal RMSE"));
            items.Add((Format.Number(o.HorizontalPercentile(0.95)) + " m", prefix + "95th percentile horizontal error"));
            items.Add((Format.Percent(o.TrackedFraction), prefix + "truth samples tracked"));
            items.Add((Format.Percent(o.RejectionRate), prefix + "TDOAs rejected"));
        }

        doc.Kpis(items);
    }

    /// <summary>Per-robot table of one run, with an "all robots" total row.</summary>
    public static HtmlTable RobotTable(TrackingRun run)
    {
        var table = new HtmlTable("robot", "scored samples", "RMSE horiz. (m)", "RMSE vert. (m)", "RMSE 3-D (m)", "p50 horiz. (m)", "p95 horiz. (m)",
            "rejected (%)", "down-weighted (%)", "NEES in 95 % band (%)", "tracked (%)", "re-inits");
        foreach (var (robot, e) in run.Result.PerRobot)
        {
            table.Add(Row(robot, e));
        }

        table.Add(Row("all robots", run.Result.Overall), "total");
        return table;
    }

    private static string[] Row(string name, ErrorAccumulator e) =>
    [
        name,
        e.Samples.ToString(System.Globalization.CultureInfo.InvariantCulture),
        Format.Number(e.RmseHorizontal),
        Format.Number(e.RmseVertical),
        Format.Number(e.Rmse3D),
        Format.Number(e.HorizontalPercentile(0.5)),
        Format.Number(e.HorizontalPercentile(0.95)),
        Format.Percent(e.RejectionRate),
        Format.Percent(e.DownWeightRate),
        Format.Percent(e.NeesInBandFraction),
        Format.Percent(e.TrackedFraction),
        e.Reinitialisations.ToString(System.Globalization.CultureInfo.InvariantCulture),
    ];

    /// <summary>Overlaid CDFs of the horizontal error of every run.</summary>
    public static string ErrorCdf(IReadOnlyList<TrackingRun> runs, string title = "Horizontal position error, cumulative distribution")
    {
        var all = runs.SelectMany(r => r.Result.Overall.HorizontalErrors).Where(double.IsFinite).Order().ToArray();

        // Cut the x axis at the 99.5th percentile of all runs so a few outliers do not squash the curves.
        var xMax = all.Length == 0 ? 1 : all[(int)Math.Min(all.Length - 1, Math.Ceiling(0.995 * all.Length))];
        var spec = new ChartSpec(title, "horizontal error (m)", "samples with error ≤ x (%)")
        {
            XMax = Math.Max(xMax, 1e-3),
            References = [new ReferenceLine("95 % of samples", 95)],
        };
        return Charts.Cdf(spec, runs.Select(r => (Label(r, r.Result.Overall), (IReadOnlyList<double>)r.Result.Overall.HorizontalErrors)).ToArray());
    }

    private static string Label(TrackingRun r, ErrorAccumulator e) =>
        $"{r.Label}: {r.Description} (p95 {Format.Number(e.HorizontalPercentile(0.95))} m)";

    /// <summary>Error against time for all robots together, one line per run (bin means).</summary>
    public static string ErrorOverTime(IReadOnlyList<TrackingRun> runs, out double binSeconds)
    {
        var times = runs.SelectMany(r => r.Result.Overall.ErrorTimes).Where(double.IsFinite).ToArray();
        binSeconds = BinWidth(times.Length == 0 ? 1 : times.Max() - times.Min());
        var bin = binSeconds;
        var series = runs.Select(r => new ChartSeries($"{r.Label}: {r.Description}", BinnedMean(r.Result.Overall.ErrorTimes, r.Result.Overall.HorizontalErrors, bin))).ToArray();
        return Charts.Line(new ChartSpec($"Horizontal error against time, all robots ({Format.Number(bin, bin < 1 ? 1 : 0)} s means)", "log time (s)", "horizontal error (m)"), series);
    }

    /// <summary>Small multiples: error against time per robot, runs overlaid.</summary>
    public static IReadOnlyList<string> ErrorOverTimePerRobot(IReadOnlyList<TrackingRun> runs, double binSeconds)
    {
        var robots = runs[0].Result.PerRobot.Keys.Take(MaxRobotPanels).ToArray();
        var yMax = 0.0;
        var perRobot = new List<(string Robot, ChartSeries[] Series)>();
        foreach (var robot in robots)
        {
            var series = runs.Where(r => r.Result.PerRobot.ContainsKey(robot)).Select(r =>
            {
                var e = r.Result.PerRobot[robot];
                return new ChartSeries($"{r.Label}: {r.Description}", BinnedMean(e.ErrorTimes, e.HorizontalErrors, binSeconds));
            }).ToArray();
            foreach (var s in series)
            {
                foreach (var p in s.Points)
                {
                    yMax = Math.Max(yMax, p.Y);
                }
            }

            perRobot.Add((robot, series));
        }

        // One y scale for every panel so robots compare at a glance.
        return perRobot.Select(p => Charts.Line(
            new ChartSpec($"{p.Robot}: horizontal error ({Format.Number(binSeconds, binSeconds < 1 ? 1 : 0)} s means)", "log time (s)", "error (m)")
            {
                Width = 470,
                PlotHeight = 150,
                YMin = 0,
                YMax = yMax > 0 ? yMax : null,
            },
            p.Series)).ToArray();
    }

    /// <summary>Rejected and down-weighted shares of TDOAs per robot, per run.</summary>
    public static string RejectionBars(IReadOnlyList<TrackingRun> runs)
    {
        var names = new List<string>();
        foreach (var r in runs)
        {
            var prefix = runs.Count > 1 ? r.Label + " " : string.Empty;
            names.Add(prefix + "rejected");
            names.Add(prefix + "down-weighted");
        }

        var robots = runs[0].Result.PerRobot.Keys.ToArray();
        var groups = robots.Select(robot => new BarGroup(robot, runs.SelectMany(r => r.Result.PerRobot.TryGetValue(robot, out var e)
            ? new[] { 100 * e.RejectionRate, 100 * e.DownWeightRate }
            : [double.NaN, double.NaN]).ToArray())).ToList();
        groups.Add(new BarGroup("all", runs.SelectMany(r => new[] { 100 * r.Result.Overall.RejectionRate, 100 * r.Result.Overall.DownWeightRate }).ToArray()));
        return Charts.Bars(new ChartSpec("TDOA rejection and down-weighting per robot", "robot", "share of TDOAs (%)") { YMin = 0 }, names, groups);
    }

    /// <summary>Share of scored samples whose 3-D NEES falls in the two-sided 95 % χ²(3) band, per robot and run.</summary>
    public static string NeesBars(IReadOnlyList<TrackingRun> runs)
    {
        var names = runs.Select(r => runs.Count > 1 ? $"{r.Label}: NEES in band" : "NEES in band").ToArray();
        var robots = runs[0].Result.PerRobot.Keys.ToArray();
        var groups = robots.Select(robot => new BarGroup(robot, runs.Select(r => r.Result.PerRobot.TryGetValue(robot, out var e)
            ? 100 * e.NeesInBandFraction : double.NaN).ToArray())).ToList();
        groups.Add(new BarGroup("all", runs.Select(r => 100 * r.Result.Overall.NeesInBandFraction).ToArray()));

        // A consistent filter puts 95 % of NEES values inside the two-sided 95 % χ² band (Bar-Shalom et al. 2001, §5.4; from memory).
        return Charts.Bars(new ChartSpec("NEES consistency: samples inside the 95 % χ²(3) band", "robot", "samples in band (%)")
        {
            YMin = 0,
            YMax = 100,
            References = [new ReferenceLine("95 % expected for a consistent filter", 95)],
        }, names, groups);
    }

    /// <summary>A/B table: each figure for both runs, B − A and the relative change.</summary>
    public static HtmlTable DeltaTable(TrackingRun a, TrackingRun b)
    {
        var table = new HtmlTable("figure", $"{a.Label}: {a.Description}", $"{b.Label}: {b.Description}", "B − A", "change (%)");
        void Metric(string name, Func<ErrorAccumulator, double> get, bool percent = false, int digits = 3)
        {
            var va = get(a.Result.Overall);
            var vb = get(b.Result.Overall);
            var scale = percent ? 100 : 1;
            var unitText = percent ? " pp" : string.Empty;
            table.Add(
                name,
                percent ? Format.Percent(va) : Format.Number(va, digits),
                percent ? Format.Percent(vb) : Format.Number(vb, digits),
                Format.Signed((vb - va) * scale, percent ? 1 : digits) + unitText,
                va != 0 && double.IsFinite(va) && double.IsFinite(vb) ? Format.Signed(100 * (vb - va) / Math.Abs(va), 1) + " %" : "–");
        }

        Metric("RMSE horizontal (m)", e => e.RmseHorizontal);
        Metric("RMSE vertical (m)", e => e.RmseVertical);
        Metric("RMSE 3-D (m)", e => e.Rmse3D);
        Metric("p50 horizontal (m)", e => e.HorizontalPercentile(0.5));
        Metric("p95 horizontal (m)", e => e.HorizontalPercentile(0.95));
        Metric("max horizontal (m)", e => e.HorizontalErrors.Count == 0 ? double.NaN : e.HorizontalErrors.Max());
        Metric("TDOAs rejected (%)", e => e.RejectionRate, percent: true);
        Metric("TDOAs down-weighted (%)", e => e.DownWeightRate, percent: true);
        Metric("NEES in 95 % band (%)", e => e.NeesInBandFraction, percent: true);
        Metric("truth samples tracked (%)", e => e.TrackedFraction, percent: true);
        Metric("re-initialisations (count)", e => e.Reinitialisations, digits: 0);
        return table;
    }
}
