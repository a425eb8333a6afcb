using System.Globalization;

namespace Fleet.Reports.Rendering;

/// <summary>
/// Colour-blind-safe colours. Continuous data uses viridis (perceptually uniform, readable in grey scale and by
/// the common colour-vision deficiencies); categorical series use the Okabe–Ito set of eight colours.
/// </summary>
public static class Palette
{
    // Viridis sampled at 0, 1/8, …, 1 (matplotlib's colormap, values from memory to about ±2/255); linear in sRGB
    // between the stops, which is close enough for a map legend.
    private static readonly (byte R, byte G, byte B)[] ViridisStops =
    [
        (0x44, 0x01, 0x54), (0x48, 0x24, 0x75), (0x3b, 0x52, 0x8b), (0x2c, 0x72, 0x8e), (0x21, 0x91, 0x8c),
        (0x27, 0xad, 0x81), (0x5e, 0xc9, 0x62), (0xaa, 0xdc, 0x32), (0xfd, 0xe7, 0x25),
    ];

    /// <summary>
    /// Okabe–Ito colours (M. Okabe and K. Ito, "Color Universal Design", 2008), ordered for a white background:
    /// blue, vermillion, bluish green, reddish purple, orange, sky blue, black, yellow.
    /// </summary>
    public static IReadOnlyList<string> Categorical { get; } =
        ["#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#000000", "#F0E442"];

    /// <summary>Colour of categorical series <paramref name="index"/>; cycles after eight (pair with <see cref="Dash"/>).</summary>
    public static string Series(int index) => Categorical[((index % Categorical.Count) + Categorical.Count) % Categorical.Count];

    /// <summary>Dash pattern telling apart series that share a colour after the palette wraps; null for solid.</summary>
    public static string? Dash(int index) => (index / Categorical.Count % 3) switch
    {
        0 => null,
        1 => "6 3",
        _ => "2 2",
    };

    /// <summary>Viridis colour at <paramref name="t"/> in [0, 1] (clamped; NaN gives the low end) as #rrggbb.</summary>
    public static string Viridis(double t)
    {
        if (double.IsNaN(t))
        {
            t = 0;
        }

        t = Math.Clamp(t, 0, 1) * (ViridisStops.Length - 1);
        var i = Math.Min((int)Math.Floor(t), ViridisStops.Length - 2);
        var f = t - i;
        var a = ViridisStops[i];
        var b = ViridisStops[i + 1];
        return Hex(Lerp(a.R, b.R, f), Lerp(a.G, b.G, f), Lerp(a.B, b.B, f));
    }

    private static byte Lerp(byte a, byte b, double f) => (byte)Math.Round(a + ((b - a) * f));

    private static string Hex(byte r, byte g, byte b) => string.Create(CultureInfo.InvariantCulture, $"#{r:x2}{g:x2}{b:x2}");
}
