using System.Globalization;

namespace Fleet.Reports.Rendering;

/// <summary>Invariant-culture number formatting for reports; NaN and infinities show as an en dash.</summary>
public static class Format
{
    /// <summary>A number with <paramref name="digits"/> decimals, or "–" when not finite.</summary>
    public static string Number(double value, int digits = 3) =>
        double.IsFinite(value) ? value.ToString("F" + digits.ToString(CultureInfo.InvariantCulture), CultureInfo.InvariantCulture) : "–";

    /// <summary>A fraction (0–1) as a percentage with one decimal and a % sign, or "–".</summary>
    public static string Percent(double fraction, int digits = 1) =>
        double.IsFinite(fraction) ? Number(fraction * 100, digits) + " %" : "–";

    /// <summary>A signed number (+/−) for deltas.</summary>
    public static string Signed(double value, int digits = 3) =>
        !double.IsFinite(value) ? "–" : (value > 0 ? "+" : value < 0 ? "−" : "±") + Number(Math.Abs(value), digits);

    /// <summary>Compact coordinate for SVG attributes (at most 2 decimals).</summary>
    internal static string Coord(double value) => Math.Round(value, 2).ToString("0.##", CultureInfo.InvariantCulture);

    /// <summary>Escapes text for HTML and XML (element content and attribute values).</summary>
    public static string Escape(string text) => text
        .Replace("&", "&amp;", StringComparison.Ordinal)
        .Replace("<", "&lt;", StringComparison.Ordinal)
        .Replace(">", "&gt;", StringComparison.Ordinal)
        .Replace("\"", "&quot;", StringComparison.Ordinal)
        .Replace("'", "&#39;", StringComparison.Ordinal);
}
