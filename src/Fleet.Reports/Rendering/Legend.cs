namespace Fleet.Reports.Rendering;

/// <summary>How a legend entry is drawn.</summary>
public enum LegendSwatch
{
    /// <summary>A short line in the entry's colour (and dash).</summary>
    Line,

    /// <summary>A filled box.</summary>
    Box,

    /// <summary>An outlined, unfilled box.</summary>
    Outline,

    /// <summary>A round marker with a short line (an anchor and its boresight).</summary>
    Marker,
}

/// <summary>One legend entry.</summary>
public sealed record LegendEntry(string Label, string Colour, LegendSwatch Swatch = LegendSwatch.Line, string? Dash = null, string? Fill = null);

/// <summary>Lays out legend entries in rows under a chart, inside a <c>&lt;g class="legend"&gt;</c>.</summary>
internal static class Legend
{
    private const double RowHeight = 18;
    private const double SwatchWidth = 22;

    /// <summary>Rough text width (px) for a 12 px sans-serif font; only used to wrap rows.</summary>
    public static double TextWidth(string text, double size = 12) => text.Length * size * 0.56;

    /// <summary>Height (px) the entries take when wrapped to <paramref name="width"/>.</summary>
    public static double Height(IReadOnlyList<LegendEntry> entries, double width) => Rows(entries, width).Count * RowHeight;

    public static void Draw(SvgCanvas svg, IReadOnlyList<LegendEntry> entries, double x, double y, double width)
    {
        svg.OpenGroup("legend");
        var rowY = y;
        foreach (var row in Rows(entries, width))
        {
            var cx = x;
            foreach (var e in row)
            {
                var mid = rowY + (RowHeight / 2);
                switch (e.Swatch)
                {
                    case LegendSwatch.Box:
                        svg.Rect(cx, mid - 6, 16, 12, e.Fill ?? e.Colour, "#444", 0.5);
                        break;
                    case LegendSwatch.Outline:
                        svg.Rect(cx + 1, mid - 6, 14, 12, e.Fill ?? "none", e.Colour, 2);
                        break;
                    case LegendSwatch.Marker:
                        svg.Line(cx + 5, mid, cx + 17, mid - 5, e.Colour, 2);
                        svg.Circle(cx + 5, mid, 4.5, e.Fill ?? "#fff", e.Colour, 2);
                        break;
                    default:
                        svg.Line(cx, mid, cx + 18, mid, e.Colour, 2.5, e.Dash);
                        break;
                }

                svg.Text(cx + SwatchWidth, mid + 4, e.Label, size: 12);
                cx += EntryWidth(e);
            }

            rowY += RowHeight;
        }

        svg.CloseGroup();
    }

    private static double EntryWidth(LegendEntry e) => SwatchWidth + TextWidth(e.Label) + 18;

    private static List<List<LegendEntry>> Rows(IReadOnlyList<LegendEntry> entries, double width)
    {
        var rows = new List<List<LegendEntry>>();
        var current = new List<LegendEntry>();
        double used = 0;
        foreach (var e in entries)
        {
            var w = EntryWidth(e);
            if (current.Count > 0 && used + w > width)
            {
                rows.Add(current);
                current = [];
                used = 0;
            }

            current.Add(e);
            used += w;
        }

        if (current.Count > 0)
        {
            rows.Add(current);
        }

        return rows;
    }
}
