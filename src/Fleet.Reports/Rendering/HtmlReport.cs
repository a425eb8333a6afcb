using System.Text;

namespace Fleet.Reports.Rendering;

/// <summary>
/// A self-contained HTML document: inline CSS, inline SVG, no scripts, fonts or images from elsewhere, so the
/// file can be mailed or archived and still open offline. Build it top to bottom, then call <see cref="ToHtml"/>.
/// </summary>
public sealed class HtmlReport(string title)
{
    private const string Css = """
        :root { color-scheme: light; }
        body { font-family: system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", Arial, sans-serif;
               color: #1f1f1f; background: #fff; margin: 0; line-height: 1.45; font-size: 15px; }
        main { max-width: 1520px; margin: 0 auto; padding: 24px 20px 60px; }
        h1 { font-size: 26px; margin: 0 0 4px; }
        h2 { font-size: 20px; margin: 36px 0 8px; padding-bottom: 4px; border-bottom: 2px solid #0072B2; }
        h3 { font-size: 16px; margin: 22px 0 6px; }
        p.meta { color: #555; margin: 0 0 14px; }
        p.note { color: #444; max-width: 70em; }
        nav ul { columns: 3; list-style: none; padding: 0; margin: 8px 0 0; }
        nav a { color: #0057a0; }
        .figures { display: flex; flex-wrap: wrap; gap: 18px 26px; align-items: flex-start; }
        figure { margin: 0; max-width: 660px; }
        figcaption { font-size: 13px; color: #444; margin-top: 2px; }
        svg.chart { max-width: 100%; height: auto; font-family: inherit; background: #fff; }
        .table-wrap { overflow-x: auto; margin: 6px 0 10px; }
        table { border-collapse: collapse; font-size: 14px; }
        caption { text-align: left; font-weight: 600; padding: 4px 0; }
        th, td { padding: 4px 10px; border-bottom: 1px solid #ddd; text-align: left; white-space: nowrap; }
        th { background: #f1f4f7; font-weight: 600; }
        td.num { text-align: right; font-variant-numeric: tabular-nums; }
        tbody tr:nth-child(even) { background: #fafafa; }
        tr.total td { font-weight: 600; border-top: 2px solid #999; }
        tr.warn td { background: #fff1e0; }
        ul.findings { padding-left: 1.2em; }
        ul.findings li { margin: 3px 0; }
        .sev { display: inline-block; min-width: 5.2em; font-weight: 600; }
        .sev-warning { color: #a34700; }
        .sev-info { color: #00507d; }
        .sev-ok { color: #006b4f; }
        .kpis { display: flex; flex-wrap: wrap; gap: 12px; margin: 10px 0; }
        .kpi { border: 1px solid #d6dde3; border-radius: 6px; padding: 8px 14px; min-width: 150px; }
        .kpi b { display: block; font-size: 20px; font-variant-numeric: tabular-nums; }
        .kpi span { font-size: 13px; color: #555; }
        footer { margin-top: 48px; color: #666; font-size: 13px; }
        """;

    private readonly StringBuilder _body = new();
    private readonly List<(string Id, string Heading)> _sections = [];

    public string Title { get; } = title;

    /// <summary>Lines under the title (site, inputs, generation time).</summary>
    public List<string> Meta { get; } = [];

    public HtmlReport Section(string heading)
    {
        var id = "s" + (_sections.Count + 1).ToString(System.Globalization.CultureInfo.InvariantCulture);
        _sections.Add((id, heading));
        _body.Append("<h2 id=\"").Append(id).Append("\">").Append(Format.Escape(heading)).Append("</h2>");
        return this;
    }

    public HtmlReport Subsection(string heading)
    {
        _body.Append("<h3>").Append(Format.Escape(heading)).Append("</h3>");
        return this;
    }

    public HtmlReport Paragraph(string text)
    {
        _body.Append("<p class=\"note\">").Append(Format.Escape(text)).Append("</p>");
        return this;
    }

    /// <summary>Headline figures as small boxes: value (with unit) over a label.</summary>
    public HtmlReport Kpis(IEnumerable<(string Value, string Label)> items)
    {
        _body.Append("<div class=\"kpis\">");
        foreach (var (value, label) in items)
        {
            _body.Append("<div class=\"kpi\"><b>").Append(Format.Escape(value)).Append("</b><span>").Append(Format.Escape(label)).Append("</span></div>");
        }

        _body.Append("</div>");
        return this;
    }

    /// <summary>Findings with a severity word in front ("warning", "info", "ok").</summary>
    public HtmlReport Findings(IEnumerable<(string Severity, string Text)> items)
    {
        _body.Append("<ul class=\"findings\">");
        foreach (var (severity, text) in items)
        {
            _body.Append("<li><span class=\"sev sev-").Append(Format.Escape(severity)).Append("\">").Append(Format.Escape(severity))
                .Append("</span> ").Append(Format.Escape(text)).Append("</li>");
        }

        _body.Append("</ul>");
        return this;
    }

    public HtmlReport Table(HtmlTable table, string? caption = null)
    {
        _body.Append(table.ToHtml(caption));
        return this;
    }

    /// <summary>Starts a wrapping row of figures; close it with <see cref="EndFigures"/>.</summary>
    public HtmlReport BeginFigures()
    {
        _body.Append("<div class=\"figures\">");
        return this;
    }

    public HtmlReport EndFigures()
    {
        _body.Append("</div>");
        return this;
    }

    /// <summary>An SVG chart (from <see cref="Charts"/> or <see cref="FloorPlanChart"/>) with a caption.</summary>
    public HtmlReport Figure(string svg, string? caption = null)
    {
        _body.Append("<figure>").Append(svg);
        if (caption is not null)
        {
            _body.Append("<figcaption>").Append(Format.Escape(caption)).Append("</figcaption>");
        }

        _body.Append("</figure>");
        return this;
    }

    public string ToHtml()
    {
        var sb = new StringBuilder(_body.Length + 4096);
        sb.Append("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">")
            .Append("<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">")
            .Append("<title>").Append(Format.Escape(Title)).Append("</title><style>").Append(Css).Append("</style></head><body><main>");
        sb.Append("<h1>").Append(Format.Escape(Title)).Append("</h1>");
        foreach (var line in Meta)
        {
            sb.Append("<p class=\"meta\">").Append(Format.Escape(line)).Append("</p>");
        }

        if (_sections.Count > 2)
        {
            sb.Append("<nav><ul>");
            foreach (var (id, heading) in _sections)
            {
                sb.Append("<li><a href=\"#").Append(id).Append("\">").Append(Format.Escape(heading)).Append("</a></li>");
            }

            sb.Append("</ul></nav>");
        }

        sb.Append(_body);
        sb.Append("<footer>Generated by the fleet command. Fleet poses support traffic coordination only; they are not a safety function (see ISO 3691-4).</footer>");
        sb.Append("</main></body></html>\n");
        return sb.ToString();
    }
}
