namespace Fleet.Reports.Rendering;

/// <summary>A linear axis: data range → pixel range, with "nice" ticks (steps of 1, 2 or 5 × 10ⁿ; common practice).</summary>
internal sealed class Axis
{
    public Axis(double min, double max, double pixelStart, double pixelEnd, bool nice = true, int targetTicks = 6)
    {
        if (!double.IsFinite(min) || !double.IsFinite(max))
        {
            (min, max) = (0, 1);
        }

        if (max - min < 1e-12)
        {
            var pad = Math.Abs(min) > 1e-12 ? Math.Abs(min) * 0.1 : 1;
            min -= pad;
            max += pad;
        }

        Step = NiceStep((max - min) / Math.Max(1, targetTicks));
        if (nice)
        {
            min = Math.Floor((min / Step) + 1e-9) * Step;
            max = Math.Ceiling((max / Step) - 1e-9) * Step;
        }

        Min = min;
        Max = max;
        PixelStart = pixelStart;
        PixelEnd = pixelEnd;
    }

    public double Min { get; }

    public double Max { get; }

    public double Step { get; }

    public double PixelStart { get; }

    public double PixelEnd { get; }

    public double ToPixel(double value) => PixelStart + ((value - Min) / (Max - Min) * (PixelEnd - PixelStart));

    /// <summary>Tick values from <see cref="Min"/> to <see cref="Max"/> at multiples of <see cref="Step"/>.</summary>
    public IEnumerable<double> Ticks()
    {
        var first = Math.Ceiling((Min / Step) - 1e-9);
        for (var k = first; (k * Step) <= Max + (Step * 1e-9); k++)
        {
            yield return Math.Abs(k * Step) < Step * 1e-9 ? 0 : k * Step;
        }
    }

    /// <summary>Decimals needed to print the ticks exactly.</summary>
    public int Decimals => Math.Max(0, (int)Math.Ceiling(-Math.Log10(Step) - 1e-9));

    public string Label(double value) => Format.Number(value, Decimals);

    public static double NiceStep(double raw)
    {
        if (!(raw > 0) || !double.IsFinite(raw))
        {
            return 1;
        }

        var magnitude = Math.Pow(10, Math.Floor(Math.Log10(raw)));
        var f = raw / magnitude;
        var nice = f <= 1 ? 1 : f <= 2 ? 2 : f <= 5 ? 5 : 10;
        return nice * magnitude;
    }
}
