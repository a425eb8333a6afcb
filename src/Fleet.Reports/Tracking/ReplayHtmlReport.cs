using Fleet.Reports.Rendering;

namespace Fleet.Reports.Tracking;

/// <summary>What a replay report shows: the site and log names and one or two runs over the same log (A, and B to compare).</summary>
public sealed record ReplayReportInput(string SiteId, string LogName, IReadOnlyList<TrackingRun> Runs)
{
    /// <summary>Records read from the log (all types).</summary>
    public long Records { get; init; }

    /// <summary>Extra lines under the title (inputs, settings).</summary>
    public IReadOnlyList<string> Notes { get; init; } = [];
}

/// <summary>The replay report: per-robot accuracy, error CDF, error against time, rejection and NEES figures, and an A/B comparison.</summary>
public static class ReplayHtmlReport
{
    public static string Render(ReplayReportInput input)
    {
        ArgumentNullException.ThrowIfNull(input);
        if (input.Runs.Count is < 1 or > 2)
        {
            throw new ArgumentException("a replay report shows one run, or two to compare", nameof(input));
        }

        var runs = input.Runs;
        var doc = new HtmlReport($"Replay report: {input.SiteId}");
        doc.Meta.Add($"log {input.LogName} · {input.Records} records · {runs[0].Result.PerRobot.Count} robots · generated {DateTimeOffset.UtcNow:yyyy-MM-dd HH:mm} UTC");
        doc.Meta.AddRange(input.Notes);

        doc.Section(runs.Count > 1 ? "Summary and A/B comparison" : "Summary");
        TrackingSections.AddKpis(doc, runs);
        var configs = new HtmlTable("run", "configuration", "TDOAs", "scored truth samples", "unknown-anchor TDOAs");
        foreach (var r in runs)
        {
            configs.Add(r.Label, r.Description, r.Result.Overall.Measurements.ToString(System.Globalization.CultureInfo.InvariantCulture),
                r.Result.Overall.Samples.ToString(System.Globalization.CultureInfo.InvariantCulture),
                r.Result.UnknownAnchorMeasurements.ToString(System.Globalization.CultureInfo.InvariantCulture));
        }

        doc.Table(configs, "Configurations");
        if (runs.Count > 1)
        {
            doc.Table(TrackingSections.DeltaTable(runs[0], runs[1]), "B against A (negative error deltas mean B is better)");
        }

        doc.Section("Error distribution");
        doc.BeginFigures().Figure(TrackingSections.ErrorCdf(runs),
            "Share of scored truth samples whose horizontal tag error is at most x. Further left and steeper is better. Samples are scored once the robot has been tracked for the settle time.")
            .EndFigures();

        doc.Section("Per-robot accuracy");
        foreach (var r in runs)
        {
            doc.Table(TrackingSections.RobotTable(r), $"{r.Label}: {r.Description}");
        }

        doc.Section("Error against time");
        doc.BeginFigures().Figure(TrackingSections.ErrorOverTime(runs, out var bin), "Mean horizontal error of all robots in each time bin.").EndFigures();
        doc.Subsection("Per robot");
        doc.BeginFigures();
        foreach (var svg in TrackingSections.ErrorOverTimePerRobot(runs, bin))
        {
            doc.Figure(svg);
        }

        doc.EndFigures();
        if (runs[0].Result.PerRobot.Count > TrackingSections.MaxRobotPanels)
        {
            doc.Paragraph($"Only the first {TrackingSections.MaxRobotPanels} robots are drawn; the tables list all.");
        }

        doc.Section("Measurement rejection and filter consistency");
        doc.BeginFigures()
            .Figure(TrackingSections.RejectionBars(runs), "Rejected: the innovation gate refused the TDOA. Down-weighted: the robust update gave it weight below one.")
            .Figure(TrackingSections.NeesBars(runs), "Normalised estimation error squared (NEES) of the tag position against truth. A consistent filter has about 95 % of samples in the band; fewer means the reported covariance does not match the actual error (NEES above the band: over-confident; below: too cautious).")
            .EndFigures();
        return doc.ToHtml();
    }
}
