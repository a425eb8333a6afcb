using System.Globalization;
using Fleet.Estimation.Evaluation;
using Fleet.Estimation.Measurements;
using Fleet.Reports.Rendering;
using Fleet.Reports.Tracking;

namespace Fleet.Reports.Site;

/// <summary>Counts from a measurement log: TDOAs per anchor (as either end of the pair), robots, truth lines, time span.</summary>
public sealed record LogSummary(IReadOnlyDictionary<string, long> TdoasPerAnchor, int Robots, long Tdoas, long Truths, double DurationSeconds)
{
    public static LogSummary From(IEnumerable<ObservationRecord> records)
    {
        var perAnchor = new Dictionary<string, long>(StringComparer.Ordinal);
        var robots = new HashSet<string>(StringComparer.Ordinal);
        long tdoas = 0, truths = 0;
        double t0 = double.PositiveInfinity, t1 = double.NegativeInfinity;
        foreach (var record in records)
        {
            robots.Add(record.Robot);
            var time = record switch
            {
                TdoaRecord t => t.Time,
                TruthRecord t => t.Time,
                OdometryRecord o => o.Time,
                _ => double.NaN,
            };
            if (double.IsFinite(time))
            {
                t0 = Math.Min(t0, time);
                t1 = Math.Max(t1, time);
            }

            if (record is TdoaRecord tdoa)
            {
                tdoas++;
                perAnchor[tdoa.AnchorA] = perAnchor.GetValueOrDefault(tdoa.AnchorA) + 1;
                perAnchor[tdoa.AnchorB] = perAnchor.GetValueOrDefault(tdoa.AnchorB) + 1;
            }
            else if (record is TruthRecord)
            {
                truths++;
            }
        }

        return new LogSummary(perAnchor, robots.Count, tdoas, truths, double.IsFinite(t0) ? t1 - t0 : 0);
    }
}

/// <summary>
/// Bias-model validation against truth: per-anchor TDOA residuals (measured − true, m) before and after the model,
/// and the filter replayed without and with it. Without a model, <see cref="ModelName"/> and <see cref="WithModel"/>
/// are null and the "after" residuals equal the "before" ones.
/// </summary>
public sealed record BiasValidation(
    IReadOnlyList<AnchorResidualStatistics> PerAnchor,
    AnchorResidualStatistics Overall,
    int Samples,
    TrackingRun WithoutModel,
    TrackingRun? WithModel,
    string? ModelName);

/// <summary>Everything the commissioning report shows.</summary>
public sealed record SiteReportInput(SiteGeometry Geometry, string SiteSource)
{
    public LogSummary? Log { get; init; }

    public string? LogSource { get; init; }

    /// <summary>Null when there is no log or the log has no truth lines.</summary>
    public BiasValidation? Validation { get; init; }

    /// <summary>Extra remarks (e.g. why validation was skipped).</summary>
    public IReadOnlyList<string> Notes { get; init; } = [];
}

/// <summary>The commissioning report of a site.</summary>
public static class SiteReport
{
    private static readonly CellCategory[] CoverageLegend =
    [
        new("covered", "#dcebd5"),
        new("covered, outside anchor hull", "#56B4E9"),
        new("hole: HDOP above limit", "#E69F00"),
        new("hole: too few anchors", "#D55E00"),
        new("hole: no fix", "#3d1f00"),
        new("inside rack", null),
    ];

    public static string Render(SiteReportInput input)
    {
        ArgumentNullException.ThrowIfNull(input);
        var g = input.Geometry;
        var layout = g.Layout;
        var o = g.Options;
        var doc = new HtmlReport($"Commissioning report: {layout.SiteId}");
        doc.Meta.Add($"site file {input.SiteSource}" + (input.LogSource is null ? string.Empty : $" · log {input.LogSource}")
            + (input.Validation?.ModelName is { } m ? $" · bias model {m}" : string.Empty) + $" · generated {DateTimeOffset.UtcNow:yyyy-MM-dd HH:mm} UTC");
        doc.Meta.Add(FormattableString.Invariant(
            $"{layout.Anchors.Count} anchors · {layout.Racks.Count} racks · floor {g.Floor.Width:0.#} m × {g.Floor.Height:0.#} m · grid {o.GridStepMetres:0.##} m · range limit {o.MaxRangeMetres:0.#} m · rack path tolerance {o.RackPathToleranceMetres:0.0#} m · σ range {o.SigmaToaMetres:0.###} m · HDOP limit {o.HdopLimit:0.##}"));

        Summary(doc, g);
        doc.Section("Geometry findings");
        doc.Findings(g.Findings.Select(f => (f.Severity, f.Message)));
        foreach (var note in input.Notes)
        {
            doc.Paragraph(note);
        }

        AnchorSection(doc, g, input.Log);
        foreach (var h in g.Heights)
        {
            HeightSection(doc, g, h);
        }

        if (input.Validation is { } v)
        {
            ValidationSection(doc, v);
        }

        return doc.ToHtml();
    }

    private static void Summary(HtmlReport doc, SiteGeometry g)
    {
        doc.Section("Summary");
        var items = new List<(string, string)>();
        foreach (var h in g.Heights)
        {
            var open = Math.Max(1, h.OpenCells);
            var good = h.CountOf(CoverageClass.Covered) + h.CountOf(CoverageClass.OutsideHull);
            items.Add((Format.Percent((double)good / open), FormattableString.Invariant($"open floor covered at {h.TagHeight:0.0#} m")));
            items.Add((Format.Number(Median(h.HdopKnownHeight), 2), FormattableString.Invariant($"median HDOP at {h.TagHeight:0.0#} m (height known)")));
            items.Add((h.Holes.Count.ToString(CultureInfo.InvariantCulture), FormattableString.Invariant($"coverage holes at {h.TagHeight:0.0#} m")));
        }

        items.Add((g.Findings.Count(f => f.Severity == "warning").ToString(CultureInfo.InvariantCulture), "geometry warnings"));
        doc.Kpis(items);
        doc.Paragraph("DOP is the position error RMS per metre of single-link range noise (m/m). Height known: ground robots whose tag height is fixed, "
            + "so only x and y are estimated. 3-D: x, y and z estimated. Each cell counts only the anchors it can use: within the range limit, and with a straight line "
            + "to the tag that runs through no more than the rack path tolerance of racks from the site file; the CRLB is the Cramér–Rao bound for that set of anchors with the given range noise.");
    }

    private static void AnchorSection(HtmlReport doc, SiteGeometry g, LogSummary? log)
    {
        doc.Section("Anchors");
        var headers = new List<string> { "anchor", "x (m)", "y (m)", "z (m)", "yaw (°)", "pitch (°)", "roll (°)", "antenna delay (m)", "boresight to floor centre (°)",
            FormattableString.Invariant($"floor within ±{g.Options.LobeHalfAngleDegrees:0} ° (%)") };
        if (log is not null)
        {
            headers.Add("TDOAs heard (count)");
        }

        var table = new HtmlTable([.. headers]);
        foreach (var a in g.Layout.Anchors.Anchors)
        {
            var aim = g.Aims.First(x => x.AnchorId == a.Id);
            var cells = new List<string>
            {
                a.Id, Format.Number(a.Position.X, 2), Format.Number(a.Position.Y, 2), Format.Number(a.Position.Z, 2),
                Format.Number(a.OrientationDegrees.X, 1), Format.Number(a.OrientationDegrees.Y, 1), Format.Number(a.OrientationDegrees.Z, 1),
                Format.Number(a.AntennaDelayMetres, 3), Format.Number(aim.AngleToFloorCentreDegrees, 0), Format.Percent(aim.FloorFractionInLobe, 0),
            };
            if (log is not null)
            {
                cells.Add(log.TdoasPerAnchor.GetValueOrDefault(a.Id).ToString(CultureInfo.InvariantCulture));
            }

            var heardNothing = log is not null && log.TdoasPerAnchor.GetValueOrDefault(a.Id) == 0;
            table.Add(cells, aim.PointsAway || heardNothing ? "warn" : null);
        }

        doc.Table(table, "Anchor positions and orientation (site frame; yaw, pitch, roll applied as Rz·Ry·Rx)");
        if (log is not null)
        {
            doc.Paragraph(FormattableString.Invariant($"The log holds {log.Tdoas} TDOAs from {log.Robots} robots over {log.DurationSeconds:0.#} s and {log.Truths} truth lines. A TDOA counts for both of its anchors."));
        }

        var scene = FloorPlanScene.FromLayout(g.Layout, g.Floor, g.Hull);
        doc.BeginFigures().Figure(FloorPlanChart.Render("Floor plan: racks, anchors and their boresights", scene),
            "Anchor markers are in plan view; the line from each marker is the plan projection of its boresight, so a steeply tilted anchor shows a short line. The dashed outline is the plan-view convex hull of the anchors.")
            .EndFigures();
    }

    private static void HeightSection(HtmlReport doc, SiteGeometry g, HeightGeometry h)
    {
        var label = FormattableString.Invariant($"{h.TagHeight:0.0#} m");
        doc.Section($"Geometry at tag height {label}");
        var scene = FloorPlanScene.FromLayout(g.Layout, g.Floor, g.Hull);
        var (hMin, hMax) = Range(g.Heights.SelectMany(x => new[] { x.HdopKnownHeight, x.Hdop3D }), g.Options.HdopLimit);
        var (vMin, vMax) = Range(g.Heights.Select(x => x.Vdop3D), g.Options.HdopLimit);
        var sigma = g.Options.SigmaToaMetres;
        var f = h.Frame;

        string Tip(int iy, int ix, string text) => FormattableString.Invariant($"x {f.X(ix):0.0#} m, y {f.Y(iy):0.0#} m: {text} ({h.UsableAnchors[iy, ix]} anchors usable)");
        var racks = new bool[f.Ny, f.Nx];
        for (var iy = 0; iy < f.Ny; iy++)
        {
            for (var ix = 0; ix < f.Nx; ix++)
            {
                racks[iy, ix] = h.Coverage[iy, ix] == CoverageClass.InsideRack;
            }
        }

        string?[,] Tips(Func<int, int, string> text)
        {
            var tips = new string?[f.Ny, f.Nx];
            for (var iy = 0; iy < f.Ny; iy++)
            {
                for (var ix = 0; ix < f.Nx; ix++)
                {
                    tips[iy, ix] = h.Coverage[iy, ix] == CoverageClass.InsideRack ? null : Tip(iy, ix, text(iy, ix));
                }
            }

            return tips;
        }

        doc.BeginFigures();
        doc.Figure(FloorPlanChart.Render($"HDOP, height known, tag at {label}", scene,
            new ContinuousLayer(f, h.HdopKnownHeight, "HDOP", "m/m", hMin, hMax) { Hidden = racks, Tooltips = Tips((iy, ix) => "HDOP " + Format.Number(h.HdopKnownHeight[iy, ix])) }),
            "Horizontal DOP for ground robots (tag height fixed). Lower is better.");
        doc.Figure(FloorPlanChart.Render($"Horizontal CRLB RMS, height known, σ = {Format.Number(sigma, 3)} m", scene,
            new ContinuousLayer(f, h.CrlbHorizontalKnownHeight, "CRLB RMS", "m", hMin * sigma, hMax * sigma)
            {
                Hidden = racks,
                Tooltips = Tips((iy, ix) => "horizontal CRLB RMS " + Format.Number(h.CrlbHorizontalKnownHeight[iy, ix]) + " m"),
            }),
            "Best achievable horizontal RMS error (m) of an unbiased estimator with independent range noise σ per link, √(Cxx + Cyy).");
        doc.Figure(FloorPlanChart.Render($"3-D HDOP, tag at {label}", scene,
            new ContinuousLayer(f, h.Hdop3D, "HDOP 3-D", "m/m", hMin, hMax) { Hidden = racks, Tooltips = Tips((iy, ix) => "3-D HDOP " + Format.Number(h.Hdop3D[iy, ix])) }),
            "Horizontal DOP when the height is estimated too (tags on lifts or people).");
        doc.Figure(FloorPlanChart.Render($"3-D VDOP, tag at {label}", scene,
            new ContinuousLayer(f, h.Vdop3D, "VDOP 3-D", "m/m", vMin, vMax) { Hidden = racks, Tooltips = Tips((iy, ix) => "3-D VDOP " + Format.Number(h.Vdop3D[iy, ix])) }),
            "Vertical DOP; large values mean height is weakly observable (little vertical spread of anchors).");

        var categories = new int[f.Ny, f.Nx];
        for (var iy = 0; iy < f.Ny; iy++)
        {
            for (var ix = 0; ix < f.Nx; ix++)
            {
                categories[iy, ix] = (int)h.Coverage[iy, ix];
            }
        }

        var coverageTips = Tips((iy, ix) => CoverageLegend[(int)h.Coverage[iy, ix]].Label + ", HDOP " + Format.Number(h.HdopKnownHeight[iy, ix]));
        doc.Figure(FloorPlanChart.Render($"Coverage at tag height {label}", scene,
            new CategoricalLayer(f, categories, CoverageLegend) { Tooltips = coverageTips },
            h.Holes.Select(x => new PlanHighlight(x.Id, x.Bounds)).ToArray()),
            FormattableString.Invariant($"Hole: fewer than {g.Options.MinimumAnchors} usable anchors, or height-known HDOP above {g.Options.HdopLimit:0.0#}. Orange boxes bound each connected hole."));
        doc.EndFigures();

        if (h.Holes.Count > 0)
        {
            var holes = new HtmlTable("hole", "x from (m)", "x to (m)", "y from (m)", "y to (m)", "area (m²)", "main cause", "fewest anchors (count)", "worst HDOP (m/m)");
            foreach (var x in h.Holes)
            {
                holes.Add(x.Id, Format.Number(x.Bounds.XMin, 1), Format.Number(x.Bounds.XMax, 1), Format.Number(x.Bounds.YMin, 1), Format.Number(x.Bounds.YMax, 1),
                    Format.Number(x.AreaSquareMetres, 1), x.Reason, x.FewestAnchors.ToString(CultureInfo.InvariantCulture), Format.Number(x.WorstHdop, 2));
            }

            doc.Table(holes, $"Coverage holes at tag height {label} (bounding boxes of connected hole cells)");
        }
    }

    private static void ValidationSection(HtmlReport doc, BiasValidation v)
    {
        var hasModel = v.ModelName is not null;
        doc.Section(hasModel ? "Bias-model validation against truth" : "TDOA residuals and tracking accuracy against truth");
        doc.Paragraph(hasModel
            ? $"TDOA residual = measured − true distance difference (m), from {v.Samples} TDOAs paired with interpolated truth. A TDOA counts for both anchors, signed so a positive mean means the anchor's links read long. Robust σ = 1.4826·MAD."
            : $"No bias model given: residuals of the raw TDOAs (measured − true, m) from {v.Samples} TDOAs paired with truth, and the filter's accuracy. Pass --bias-model to see the model's effect.");

        var headers = hasModel
            ? new[] { "anchor", "TDOAs (count)", "mean before (m)", "RMSE before (m)", "robust σ before (m)", "mean after (m)", "RMSE after (m)", "robust σ after (m)", "RMSE change (%)" }
            : ["anchor", "TDOAs (count)", "mean (m)", "RMSE (m)", "robust σ (m)"];
        var table = new HtmlTable(headers);
        foreach (var a in v.PerAnchor.Append(v.Overall))
        {
            var cells = new List<string> { a.AnchorId == "all" ? "all TDOAs" : a.AnchorId, a.Count.ToString(CultureInfo.InvariantCulture), Format.Number(a.MeanBefore, 4), Format.Number(a.RmseBefore, 4), Format.Number(a.RobustSigmaBefore, 4) };
            if (hasModel)
            {
                cells.AddRange([Format.Number(a.MeanAfter, 4), Format.Number(a.RmseAfter, 4), Format.Number(a.RobustSigmaAfter, 4),
                    Format.Signed(100 * (a.RmseAfter - a.RmseBefore) / a.RmseBefore, 1) + " %"]);
            }

            table.Add(cells, a.AnchorId == "all" ? "total" : null);
        }

        doc.Table(table, "Per-anchor TDOA residuals");
        var series = hasModel ? new[] { "RMSE before model", "RMSE after model", "|mean| before", "|mean| after" } : ["RMSE", "|mean|"];
        var groups = v.PerAnchor.Select(a => new BarGroup(a.AnchorId, hasModel
            ? [a.RmseBefore, a.RmseAfter, Math.Abs(a.MeanBefore), Math.Abs(a.MeanAfter)]
            : new[] { a.RmseBefore, Math.Abs(a.MeanBefore) })).ToArray();
        doc.BeginFigures().Figure(Charts.Bars(new ChartSpec("TDOA residuals per anchor", "anchor", "residual (m)") { YMin = 0 }, series, groups),
            "RMSE includes NLOS outliers; |mean| is the anchor's systematic offset.").EndFigures();

        var runs = v.WithModel is null ? new[] { v.WithoutModel } : [v.WithoutModel, v.WithModel];
        doc.Subsection("Tracking accuracy" + (hasModel ? " without and with the model" : string.Empty));
        TrackingSections.AddKpis(doc, runs);
        if (runs.Length > 1)
        {
            doc.Table(TrackingSections.DeltaTable(runs[0], runs[1]), "With the model (B) against without (A)");
        }

        doc.BeginFigures()
            .Figure(TrackingSections.ErrorCdf(runs), "Share of scored truth samples whose horizontal tag error is at most x.")
            .Figure(TrackingSections.ErrorOverTime(runs, out _), "Mean horizontal error of all robots per time bin.")
            .EndFigures();
        foreach (var r in runs)
        {
            doc.Table(TrackingSections.RobotTable(r), $"{r.Label}: {r.Description}");
        }
    }

    private static double Median(double[,] map)
    {
        var values = map.Cast<double>().Where(double.IsFinite).Order().ToArray();
        return values.Length == 0 ? double.NaN : values[values.Length / 2];
    }

    /// <summary>
    /// Colour range shared by maps of one kind, the same at every height: from the smallest value (rounded down to
    /// 0.1) to twice the limit, or to the largest value when that is lower, so a few extreme cells near walls do not
    /// wash out the scale where it matters.
    /// </summary>
    private static (double Min, double Max) Range(IEnumerable<double[,]> maps, double limit)
    {
        var values = maps.SelectMany(m => m.Cast<double>()).Where(double.IsFinite).ToArray();
        if (values.Length == 0)
        {
            return (0, 1);
        }

        var min = Math.Floor(values.Min() * 10) / 10;
        var max = Math.Ceiling(Math.Min(values.Max(), 2 * limit) * 10) / 10;
        return (min, Math.Max(max, min + 0.1));
    }
}
