using System.Globalization;
using System.Text;

namespace Fleet.Cli.Output;

/// <summary>A plain fixed-width text table: columns right-aligned except the first.</summary>
internal sealed class TextTable(params string[] headers)
{
    private readonly List<string[]> _rows = [];

    public void AddRow(params object?[] cells) =>
        _rows.Add(cells.Select(c => c switch
        {
            null => "",
            double d when double.IsNaN(d) => "–",
            double d => d.ToString("0.000", CultureInfo.InvariantCulture),
            IFormattable f => f.ToString(null, CultureInfo.InvariantCulture),
            _ => c.ToString() ?? "",
        }).ToArray());

    public void AddSeparator() => _rows.Add([]);

    public override string ToString()
    {
        var widths = headers.Select(h => h.Length).ToArray();
        foreach (var row in _rows)
        {
            for (var i = 0; i < row.Length && i < widths.Length; i++)
            {
                widths[i] = Math.Max(widths[i], row[i].Length);
            }
        }

        var sb = new StringBuilder();
        AppendRow(sb, headers, widths);
        sb.AppendLine(string.Join("  ", widths.Select(w => new string('-', w))));
        foreach (var row in _rows)
        {
            if (row.Length == 0)
            {
                sb.AppendLine(string.Join("  ", widths.Select(w => new string('-', w))));
                continue;
            }

            AppendRow(sb, row, widths);
        }

        return sb.ToString();
    }

    private static void AppendRow(StringBuilder sb, string[] cells, int[] widths)
    {
        for (var i = 0; i < widths.Length; i++)
        {
            var cell = i < cells.Length ? cells[i] : "";
            sb.Append(i == 0 ? cell.PadRight(widths[i]) : cell.PadLeft(widths[i]));
            if (i < widths.Length - 1)
            {
                sb.Append("  ");
            }
        }

        sb.AppendLine();
    }
}
