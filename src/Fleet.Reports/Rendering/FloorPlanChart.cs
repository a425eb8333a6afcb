namespace Fleet.Reports.Rendering;

/// <summary>
/// Plan view of a site as inline SVG: floor outline, racks as boxes, anchors as markers with a short boresight line
/// (the plan projection of body +x, so a steeply tilted anchor shows a short line) and their ids, optionally over a
/// cell layer (a heat map with colour bar, or a categorical map) and with labelled highlight boxes. Site y points up.
/// </summary>
public static class FloorPlanChart
{
    private const double Width = 660;
    private const double Left = 52;
    private const double Top = 44;
    private const double MaxPlotHeight = 460;
    private const double ColourBarBand = 104;
    private const double BoresightLengthMetres = 2.0;

    public static string Render(string title, FloorPlanScene scene, CellLayer? layer = null, IReadOnlyList<PlanHighlight>? highlights = null)
    {
        var svg = new SvgCanvas();
        var extent = scene.Floor;
        foreach (var a in scene.Anchors)
        {
            extent = extent.Union(new PlanRect(a.Position.X, a.Position.Y, a.Position.X, a.Position.Y));
        }

        const double margin = 1.0;
        extent = new PlanRect(extent.XMin - margin, extent.YMin - margin, extent.XMax + margin, extent.YMax + margin);
        var right = layer is ContinuousLayer ? ColourBarBand : 18;
        var plotWidth = Width - Left - right;
        var scale = Math.Min(plotWidth / extent.Width, MaxPlotHeight / extent.Height);
        var plotHeight = extent.Height * scale;
        double Px(double x) => Left + ((x - extent.XMin) * scale);
        double Py(double y) => Top + ((extent.YMax - y) * scale);

        svg.Text(Left - 44, 16, title, "start", 13, "chart-title", weight: "600");
        var entries = new List<LegendEntry>();
        var hatch = svg.IdPrefix + "-nofix";
        svg.Define($"<pattern id=\"{hatch}\" width=\"6\" height=\"6\" patternUnits=\"userSpaceOnUse\"><rect width=\"6\" height=\"6\" fill=\"#f4f4f4\"/><path d=\"M0,6 L6,0\" stroke=\"#8c8c8c\" stroke-width=\"1\"/></pattern>");

        // Plot background and metre grid (ticks every nice step).
        svg.Rect(Px(extent.XMin), Py(extent.YMax), extent.Width * scale, plotHeight, "#fbfbfb", "#bbb", 0.5);
        var xAxis = new Axis(extent.XMin, extent.XMax, Px(extent.XMin), Px(extent.XMax), nice: false, targetTicks: 8);
        var yAxis = new Axis(extent.YMin, extent.YMax, Py(extent.YMin), Py(extent.YMax), nice: false, targetTicks: 6);
        svg.OpenGroup("axes");
        foreach (var t in xAxis.Ticks())
        {
            svg.Line(Px(t), Py(extent.YMin), Px(t), Py(extent.YMin) + 4, "#444", 1);
            svg.Text(Px(t), Py(extent.YMin) + 16, xAxis.Label(t), "middle", 11);
        }

        foreach (var t in yAxis.Ticks())
        {
            svg.Line(Px(extent.XMin) - 4, Py(t), Px(extent.XMin), Py(t), "#444", 1);
            svg.Text(Px(extent.XMin) - 6, Py(t) + 4, yAxis.Label(t), "end", 11);
        }

        svg.Text(Left + (extent.Width * scale / 2), Top + plotHeight + 32, "x (m)", "middle", 12, "axis-label");
        svg.Text(14, Top + (plotHeight / 2), "y (m)", "middle", 12, "axis-label", rotate: -90);
        svg.CloseGroup();

        if (layer is not null)
        {
            DrawLayer(svg, layer, hatch, scale, Px, Py, entries);
        }

        svg.OpenGroup("floor");
        svg.Rect(Px(scene.Floor.XMin), Py(scene.Floor.YMax), scene.Floor.Width * scale, scene.Floor.Height * scale, "none", "#222", 2);
        svg.CloseGroup();
        entries.Add(new LegendEntry("floor outline", "#222", LegendSwatch.Outline));

        if (scene.Racks.Count > 0)
        {
            svg.OpenGroup("racks");
            foreach (var r in scene.Racks)
            {
                svg.Rect(Px(r.XMin), Py(r.YMax), r.Width * scale, r.Height * scale, "#b8b8b8", "#333", 1,
                    tooltip: $"rack x {Format.Number(r.XMin, 1)}–{Format.Number(r.XMax, 1)} m, y {Format.Number(r.YMin, 1)}–{Format.Number(r.YMax, 1)} m",
                    extra: "fill-opacity=\"0.85\"");
            }

            svg.CloseGroup();
            entries.Add(new LegendEntry("rack", "#333", LegendSwatch.Box, Fill: "#b8b8b8"));
        }

        if (scene.Hull is { Count: >= 3 } hull)
        {
            svg.Polyline(hull.Select(p => (Px(p.X), Py(p.Y))), "#000", 1.6, "7 4", closed: true, tooltip: "convex hull of the anchors (plan view)");
            entries.Add(new LegendEntry("anchor hull (plan)", "#000", LegendSwatch.Line, "7 4"));
        }

        if (highlights is { Count: > 0 })
        {
            svg.OpenGroup("highlights");
            foreach (var h in highlights)
            {
                svg.Rect(Px(h.Area.XMin), Py(h.Area.YMax), h.Area.Width * scale, h.Area.Height * scale, "none", "#D55E00", 2.2, tooltip: h.Label);
                svg.Text(Px(h.Area.XMin) + 2, Py(h.Area.YMax) - 3, h.Label, "start", 11, fill: "#8a3300", weight: "600",
                    extra: "paint-order=\"stroke\" stroke=\"#fff\" stroke-width=\"3\"");
            }

            svg.CloseGroup();
            entries.Add(new LegendEntry("coverage hole (id)", "#D55E00", LegendSwatch.Outline));
        }

        svg.OpenGroup("anchors");
        foreach (var a in scene.Anchors)
        {
            var x = Px(a.Position.X);
            var y = Py(a.Position.Y);
            var tip = $"{a.Id}: x {Format.Number(a.Position.X, 2)} m, y {Format.Number(a.Position.Y, 2)} m, z {Format.Number(a.Height, 2)} m";
            svg.Line(x, y, x + (a.BoresightPlan.X * BoresightLengthMetres * scale), y - (a.BoresightPlan.Y * BoresightLengthMetres * scale), "#000", 2.2);
            svg.Circle(x, y, 5, "#fff", "#000", 2, tip);
            // Labels point inwards so ids near the right wall are not cut off.
            var rightHalf = a.Position.X > (scene.Floor.XMin + scene.Floor.XMax) / 2;
            svg.Text(rightHalf ? x - 7 : x + 7, y - 7, a.Id, rightHalf ? "end" : "start", 11, weight: "600",
                extra: "paint-order=\"stroke\" stroke=\"#fff\" stroke-width=\"3\"");
        }

        svg.CloseGroup();
        entries.Add(new LegendEntry($"anchor (line: boresight in plan, {Format.Number(BoresightLengthMetres, 0)} m when level)", "#000", LegendSwatch.Marker));

        if (layer is ContinuousLayer continuous)
        {
            DrawColourBar(svg, continuous, Width - right + 22, Top, Math.Min(plotHeight, 320));
        }

        var legendTop = Top + plotHeight + 44;
        var legendWidth = Width - Left - 10;
        Legend.Draw(svg, entries, Left, legendTop, legendWidth);
        return svg.ToSvg(Width, legendTop + Legend.Height(entries, legendWidth) + 8, title);
    }

    private static void DrawLayer(SvgCanvas svg, CellLayer layer, string hatch, double scale, Func<double, double> px, Func<double, double> py, List<LegendEntry> entries)
    {
        var f = layer.Frame;
        var size = (f.Step * scale) + 0.4; // slight overlap hides hairline seams between cells
        svg.OpenGroup("cells");
        var anyMissing = false;
        for (var iy = 0; iy < f.Ny; iy++)
        {
            for (var ix = 0; ix < f.Nx; ix++)
            {
                if (layer.Hidden?[iy, ix] == true)
                {
                    continue;
                }

                var x = px(f.XMin + (ix * f.Step));
                var y = py(f.YMin + ((iy + 1) * f.Step));
                var tip = layer.Tooltips?[iy, ix];
                string? fill;
                if (layer is ContinuousLayer c)
                {
                    var v = c.Values[iy, ix];
                    anyMissing |= double.IsNaN(v);
                    fill = double.IsNaN(v) ? $"url(#{hatch})" : Palette.Viridis((v - c.Min) / (c.Max - c.Min));
                }
                else
                {
                    var k = ((CategoricalLayer)layer).Categories[iy, ix];
                    var legend = ((CategoricalLayer)layer).Legend;
                    fill = k >= 0 && k < legend.Count ? legend[k].Colour : null;
                }

                if (fill is not null)
                {
                    svg.Rect(x, y, size, size, fill, tooltip: tip);
                }
            }
        }

        svg.CloseGroup();
        if (layer is ContinuousLayer cl && anyMissing)
        {
            entries.Add(new LegendEntry(cl.MissingLabel, "#8c8c8c", LegendSwatch.Box, Fill: $"url(#{hatch})"));
        }

        if (layer is CategoricalLayer cat)
        {
            // Only the categories that occur, so the legend lists what the map shows.
            var present = new HashSet<int>(cat.Categories.Cast<int>());
            for (var k = 0; k < cat.Legend.Count; k++)
            {
                if (cat.Legend[k].Colour is not null && present.Contains(k))
                {
                    entries.Add(new LegendEntry(cat.Legend[k].Label, "#444", LegendSwatch.Box, Fill: cat.Legend[k].Colour));
                }
            }
        }
    }

    private static void DrawColourBar(SvgCanvas svg, ContinuousLayer layer, double x, double top, double height)
    {
        svg.OpenGroup("legend colour-bar");
        var gradient = svg.IdPrefix + "-bar";
        var stops = string.Concat(Enumerable.Range(0, 11).Select(i =>
            $"<stop offset=\"{Format.Coord(i / 10.0)}\" stop-color=\"{Palette.Viridis(1 - (i / 10.0))}\"/>"));
        svg.Define($"<linearGradient id=\"{gradient}\" x1=\"0\" y1=\"0\" x2=\"0\" y2=\"1\">{stops}</linearGradient>");
        svg.Text(x - 4, top - 20, layer.Quantity, "start", 11, weight: "600");
        svg.Text(x - 4, top - 7, $"({layer.Unit})", "start", 11);
        svg.Rect(x, top, 16, height, $"url(#{gradient})", "#444", 0.5);
        var axis = new Axis(layer.Min, layer.Max, top + height, top, nice: false, targetTicks: 6);
        foreach (var t in axis.Ticks())
        {
            var y = axis.ToPixel(t);
            svg.Line(x + 16, y, x + 20, y, "#444", 1);
            svg.Text(x + 23, y + 4, axis.Label(t), "start", 11);
        }

        svg.Text(x - 4, top + height + 16, "top colour:", "start", 10, fill: "#555");
        svg.Text(x - 4, top + height + 29, "≥ " + Format.Number(layer.Max, axis.Decimals + 1) + " " + layer.Unit, "start", 10, fill: "#555");
        svg.CloseGroup();
    }
}
