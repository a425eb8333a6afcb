namespace Fleet.Reports.Rendering;

/// <summary>One line of a line chart; points need not be sorted (they are drawn in the given order).</summary>
public sealed record ChartSeries(string Name, IReadOnlyList<(double X, double Y)> Points)
{
    /// <summary>Colour; null picks the series' Okabe–Ito colour by position.</summary>
    public string? Colour { get; init; }

    /// <summary>SVG dash pattern; null for solid (or the automatic dash after the palette wraps).</summary>
    public string? Dash { get; init; }
}

/// <summary>A labelled horizontal or vertical reference line drawn across the plot.</summary>
public sealed record ReferenceLine(string Label, double Value, bool Vertical = false);

/// <summary>Size, titles and axis labels of a chart. Axis labels should carry units, e.g. "time (s)".</summary>
public sealed record ChartSpec(string Title, string XLabel, string YLabel)
{
    public double Width { get; init; } = 660;

    public double PlotHeight { get; init; } = 260;

    public double? XMin { get; init; }

    public double? XMax { get; init; }

    public double? YMin { get; init; }

    public double? YMax { get; init; }

    public IReadOnlyList<ReferenceLine> References { get; init; } = [];
}

/// <summary>One group of a bar chart (e.g. one anchor) with one value per series.</summary>
public sealed record BarGroup(string Label, IReadOnlyList<double> Values);

/// <summary>Line, CDF and bar charts as standalone inline SVG with axes, units and a legend.</summary>
public static class Charts
{
    private const double Left = 66;
    private const double Right = 18;
    private const double Top = 30;
    private const double AxisBand = 50;

    /// <summary>A line chart of <paramref name="series"/>; NaN points break the line.</summary>
    public static string Line(ChartSpec spec, IReadOnlyList<ChartSeries> series)
    {
        var svg = new SvgCanvas();
        var finite = series.SelectMany(s => s.Points).Where(p => double.IsFinite(p.X) && double.IsFinite(p.Y)).ToArray();
        var x = new Axis(spec.XMin ?? (finite.Length > 0 ? finite.Min(p => p.X) : 0), spec.XMax ?? (finite.Length > 0 ? finite.Max(p => p.X) : 1),
            Left, spec.Width - Right, nice: spec.XMin is null || spec.XMax is null);
        var yMax = spec.YMax ?? (finite.Length > 0 ? finite.Max(p => p.Y) : 1);
        foreach (var r in spec.References.Where(r => !r.Vertical))
        {
            yMax = Math.Max(yMax, r.Value);
        }

        var y = new Axis(spec.YMin ?? Math.Min(0, finite.Length > 0 ? finite.Min(p => p.Y) : 0), yMax,
            Top + spec.PlotHeight, Top, nice: spec.YMax is null);
        DrawFrame(svg, spec, x, y);

        var clip = svg.IdPrefix + "-plot";
        svg.Define($"<clipPath id=\"{clip}\"><rect x=\"{Format.Coord(Left)}\" y=\"{Format.Coord(Top - 2)}\" width=\"{Format.Coord(spec.Width - Left - Right)}\" height=\"{Format.Coord(spec.PlotHeight + 4)}\"/></clipPath>");
        svg.OpenGroup("series", clip);
        var entries = new List<LegendEntry>();
        for (var i = 0; i < series.Count; i++)
        {
            var s = series[i];
            var colour = s.Colour ?? Palette.Series(i);
            var dash = s.Dash ?? Palette.Dash(i);
            foreach (var run in Runs(s.Points))
            {
                svg.Polyline(run.Select(p => (x.ToPixel(p.X), y.ToPixel(p.Y))), colour, 1.8, dash, tooltip: s.Name);
            }

            entries.Add(new LegendEntry(s.Name, colour, LegendSwatch.Line, dash));
        }

        svg.CloseGroup();
        DrawReferences(svg, spec, x, y, entries);
        return Finish(svg, spec, entries);
    }

    /// <summary>
    /// Empirical CDFs of the samples in <paramref name="samples"/> (name → values) as step lines, in percent of
    /// samples. Long sample lists are thinned to at most 400 steps per series (quantile points), which keeps the
    /// curve exact at the drawn points.
    /// </summary>
    public static string Cdf(ChartSpec spec, IReadOnlyList<(string Name, IReadOnlyList<double> Values)> samples)
    {
        var series = new List<ChartSeries>();
        foreach (var (name, values) in samples)
        {
            series.Add(new ChartSeries(name, CdfPoints(values)));
        }

        var xMax = spec.XMax ?? Math.Max(1e-3, samples.SelectMany(s => s.Values).Where(double.IsFinite).DefaultIfEmpty(1).Max());
        return Line(spec with { YMin = 0, YMax = 100, XMin = spec.XMin ?? 0, XMax = xMax }, series);
    }

    /// <summary>Step points (value, percent ≤ value) of the empirical CDF, thinned to at most <paramref name="maxSteps"/> steps.</summary>
    public static IReadOnlyList<(double X, double Y)> CdfPoints(IReadOnlyList<double> values, int maxSteps = 400)
    {
        var sorted = values.Where(double.IsFinite).Order().ToArray();
        var points = new List<(double X, double Y)>();
        if (sorted.Length == 0)
        {
            return points;
        }

        // Every stride-th sample from the stride-th: the drawn steps sit exactly on the empirical CDF.
        var stride = Math.Max(1, sorted.Length / maxSteps);
        points.Add((sorted[0], 0));
        for (var i = stride - 1; i < sorted.Length; i += stride)
        {
            var fraction = 100.0 * (i + 1) / sorted.Length;
            points.Add((sorted[i], points[^1].Y));
            points.Add((sorted[i], fraction));
        }

        points.Add((sorted[^1], points[^1].Y));
        points.Add((sorted[^1], 100));
        return points;
    }

    /// <summary>Grouped vertical bars: one group per entry of <paramref name="groups"/>, one bar per series name.</summary>
    public static string Bars(ChartSpec spec, IReadOnlyList<string> seriesNames, IReadOnlyList<BarGroup> groups)
    {
        var svg = new SvgCanvas();
        var values = groups.SelectMany(g => g.Values).Where(double.IsFinite).ToArray();
        var yMax = spec.YMax ?? (values.Length > 0 ? values.Max() : 1);
        foreach (var r in spec.References.Where(r => !r.Vertical))
        {
            yMax = Math.Max(yMax, r.Value);
        }

        var y = new Axis(spec.YMin ?? Math.Min(0, values.Length > 0 ? values.Min() : 0), yMax, Top + spec.PlotHeight, Top, nice: spec.YMax is null);
        var plotWidth = spec.Width - Left - Right;
        var slot = plotWidth / Math.Max(1, groups.Count);
        var rotate = groups.Count > 0 && groups.Max(g => Legend.TextWidth(g.Label, 11)) > slot - 4;
        var axisBand = rotate ? AxisBand + 30 : AxisBand;

        DrawYAxis(svg, spec, y);
        svg.Line(Left, y.ToPixel(Math.Max(0, y.Min)), spec.Width - Right, y.ToPixel(Math.Max(0, y.Min)), "#444", 1);
        var barWidth = Math.Min(28, (slot * 0.8) / Math.Max(1, seriesNames.Count));
        svg.OpenGroup("bars");
        for (var g = 0; g < groups.Count; g++)
        {
            var centre = Left + ((g + 0.5) * slot);
            var start = centre - (barWidth * seriesNames.Count / 2);
            for (var s = 0; s < seriesNames.Count && s < groups[g].Values.Count; s++)
            {
                var v = groups[g].Values[s];
                if (!double.IsFinite(v))
                {
                    continue;
                }

                var y0 = y.ToPixel(Math.Max(0, y.Min));
                var y1 = y.ToPixel(Math.Clamp(v, y.Min, y.Max));
                svg.Rect(start + (s * barWidth), Math.Min(y0, y1), barWidth - 1, Math.Abs(y1 - y0), Palette.Series(s),
                    tooltip: $"{groups[g].Label} · {seriesNames[s]}: {Format.Number(v, y.Decimals + 2)}");
            }

            var labelY = Top + spec.PlotHeight + 16;
            if (rotate)
            {
                svg.Text(centre + 4, labelY - 6, groups[g].Label, "end", 11, rotate: -45);
            }
            else
            {
                svg.Text(centre, labelY, groups[g].Label, "middle", 11);
            }
        }

        svg.CloseGroup();
        // The x axis of a bar chart names categories (robots, anchors): no unit.
        svg.Text(Left + (plotWidth / 2), Top + spec.PlotHeight + axisBand - 8, spec.XLabel, "middle", 12, "axis-label category");

        var entries = seriesNames.Select((n, i) => new LegendEntry(n, Palette.Series(i), LegendSwatch.Box)).ToList();
        var xDummy = new Axis(0, 1, Left, spec.Width - Right);
        DrawReferences(svg, spec, xDummy, y, entries);
        return Finish(svg, spec, entries, axisBand);
    }

    private static void DrawFrame(SvgCanvas svg, ChartSpec spec, Axis x, Axis y)
    {
        DrawYAxis(svg, spec, y);
        svg.OpenGroup("x-axis");
        var bottom = Top + spec.PlotHeight;
        foreach (var t in x.Ticks())
        {
            var px = x.ToPixel(t);
            svg.Line(px, Top, px, bottom, "#e3e3e3", 1);
            svg.Line(px, bottom, px, bottom + 4, "#444", 1);
            svg.Text(px, bottom + 17, x.Label(t), "middle", 11);
        }

        svg.Line(Left, bottom, spec.Width - Right, bottom, "#444", 1);
        svg.Text(Left + ((spec.Width - Left - Right) / 2), bottom + AxisBand - 12, spec.XLabel, "middle", 12, "axis-label");
        svg.CloseGroup();
    }

    private static void DrawYAxis(SvgCanvas svg, ChartSpec spec, Axis y)
    {
        svg.Text(Left - 56, 16, spec.Title, "start", 13, "chart-title", weight: "600");
        svg.OpenGroup("y-axis");
        foreach (var t in y.Ticks())
        {
            var py = y.ToPixel(t);
            svg.Line(Left, py, spec.Width - Right, py, "#e3e3e3", 1);
            svg.Text(Left - 6, py + 4, y.Label(t), "end", 11);
        }

        svg.Line(Left, Top, Left, Top + spec.PlotHeight, "#444", 1);
        svg.Text(16, Top + (spec.PlotHeight / 2), spec.YLabel, "middle", 12, "axis-label", rotate: -90);
        svg.CloseGroup();
    }

    private static void DrawReferences(SvgCanvas svg, ChartSpec spec, Axis x, Axis y, List<LegendEntry> entries)
    {
        foreach (var r in spec.References)
        {
            if (r.Vertical)
            {
                var px = x.ToPixel(r.Value);
                svg.Line(px, Top, px, Top + spec.PlotHeight, "#555", 1.2, "4 3");
            }
            else
            {
                var py = y.ToPixel(r.Value);
                svg.Line(Left, py, spec.Width - Right, py, "#555", 1.2, "4 3");
            }

            entries.Add(new LegendEntry(r.Label, "#555", LegendSwatch.Line, "4 3"));
        }
    }

    private static string Finish(SvgCanvas svg, ChartSpec spec, IReadOnlyList<LegendEntry> entries, double axisBand = AxisBand)
    {
        var legendTop = Top + spec.PlotHeight + axisBand;
        var legendWidth = spec.Width - Left - Right;
        Legend.Draw(svg, entries, Left, legendTop, legendWidth);
        return svg.ToSvg(spec.Width, legendTop + Legend.Height(entries, legendWidth) + 8, spec.Title);
    }

    private static IEnumerable<List<(double X, double Y)>> Runs(IReadOnlyList<(double X, double Y)> points)
    {
        var run = new List<(double X, double Y)>();
        foreach (var p in points)
        {
            if (double.IsFinite(p.X) && double.IsFinite(p.Y))
            {
                run.Add(p);
                continue;
            }

            if (run.Count > 0)
            {
                yield return run;
                run = [];
            }
        }

        if (run.Count > 0)
        {
            yield return run;
        }
    }
}
