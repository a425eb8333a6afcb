using System.Text;

namespace Fleet.Reports.Rendering;

/// <summary>
/// A plain HTML table. Column headers should carry units, e.g. "RMSE (m)". Cells that look numeric are
/// right-aligned with tabular figures (CSS class <c>num</c>).
/// </summary>
public sealed class HtmlTable(params string[] headers)
{
    private readonly List<(string[] Cells, string? Class)> _rows = [];

    public IReadOnlyList<string> Headers { get; } = headers;

    public int RowCount => _rows.Count;

    /// <summary>Adds a row; <paramref name="cssClass"/> marks it (e.g. "total", "warn").</summary>
    public HtmlTable Add(IEnumerable<string> cells, string? cssClass = null)
    {
        _rows.Add((cells.ToArray(), cssClass));
        return this;
    }

    public HtmlTable Add(params string[] cells) => Add(cells, null);

    public string ToHtml(string? caption = null)
    {
        var sb = new StringBuilder("<div class=\"table-wrap\"><table>");
        if (caption is not null)
        {
            sb.Append("<caption>").Append(Format.Escape(caption)).Append("</caption>");
        }

        sb.Append("<thead><tr>");
        foreach (var h in Headers)
        {
            sb.Append("<th scope=\"col\">").Append(Format.Escape(h)).Append("</th>");
        }

        sb.Append("</tr></thead><tbody>");
        foreach (var (cells, css) in _rows)
        {
            sb.Append(css is null ? "<tr>" : $"<tr class=\"{css}\">");
            for (var i = 0; i < cells.Length; i++)
            {
                var numeric = IsNumeric(cells[i]);
                sb.Append(numeric ? "<td class=\"num\">" : "<td>").Append(Format.Escape(cells[i])).Append("</td>");
            }

            sb.Append("</tr>");
        }

        sb.Append("</tbody></table></div>");
        return sb.ToString();
    }

    private static bool IsNumeric(string cell)
    {
        var t = cell.Trim().TrimEnd('%', ' ').TrimStart('+', '−', '-', '±');
        return t.Length > 0 && (t == "–" || double.TryParse(t, System.Globalization.NumberStyles.Float, System.Globalization.CultureInfo.InvariantCulture, out _));
    }
}
