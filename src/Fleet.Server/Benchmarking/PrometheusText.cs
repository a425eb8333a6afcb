using System.Globalization;

namespace Fleet.Server.Benchmarking;

/// <summary>
/// Reads sample values out of a Prometheus text exposition (<c>name{labels} value [timestamp]</c> lines, <c>#</c>
/// comments). Enough for the benchmarks' before/after scrapes; not a general parser.
/// </summary>
internal static class PrometheusText
{
    /// <summary>
    /// The sum over every label set of each of <paramref name="names"/>; a name with no sample is absent from the
    /// result (an instrument that has recorded nothing yet is not exported at all).
    /// </summary>
    public static Dictionary<string, double> Sum(string exposition, IReadOnlyCollection<string> names)
    {
        var sums = new Dictionary<string, double>(StringComparer.Ordinal);
        foreach (var raw in exposition.Split('\n'))
        {
            var line = raw.Trim();
            if (line.Length == 0 || line[0] == '#')
            {
                continue;
            }

            var nameEnd = line.IndexOfAny(['{', ' ']);
            if (nameEnd <= 0)
            {
                continue;
            }

            var name = line[..nameEnd];
            if (!names.Contains(name))
            {
                continue;
            }

            var rest = line.AsSpan(nameEnd);
            if (rest[0] == '{')
            {
                var close = rest.LastIndexOf('}');
                if (close < 0)
                {
                    continue;
                }

                rest = rest[(close + 1)..];
            }

            rest = rest.TrimStart();
            var space = rest.IndexOf(' ');
            var token = space < 0 ? rest : rest[..space];
            if (TryParseValue(token, out var value))
            {
                sums[name] = sums.GetValueOrDefault(name) + value;
            }
        }

        return sums;
    }

    private static bool TryParseValue(ReadOnlySpan<char> token, out double value)
    {
        // The exposition format spells infinities +Inf/-Inf, which .NET does not parse by itself.
        switch (token)
        {
            case "+Inf":
                value = double.PositiveInfinity;
                return true;
            case "-Inf":
                value = double.NegativeInfinity;
                return true;
            case "NaN":
                value = double.NaN;
                return true;
            default:
                return double.TryParse(token, NumberStyles.Float, CultureInfo.InvariantCulture, out value);
        }
    }
}
