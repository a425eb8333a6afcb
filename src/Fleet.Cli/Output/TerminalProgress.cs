using System.Diagnostics;

namespace Fleet.Cli.Output;

/// <summary>
/// A one-line progress bar on stderr, drawn only when stderr is a terminal, at most ~10 times a second,
/// so redirected output and JSON on stdout stay clean.
/// </summary>
internal sealed class TerminalProgress : IDisposable
{
    private readonly string _label;
    private readonly bool _enabled;
    private readonly Stopwatch _clock = Stopwatch.StartNew();
    private long _lastDrawMs = -1000;
    private bool _drawn;

    public TerminalProgress(string label, bool enabled = true)
    {
        _label = label;
        _enabled = enabled && !Console.IsErrorRedirected;
    }

    /// <summary>Reports a fraction done (0–1) and an optional status text.</summary>
    public void Report(double fraction, string? status = null)
    {
        if (!_enabled || _clock.ElapsedMilliseconds - _lastDrawMs < 100)
        {
            return;
        }

        _lastDrawMs = _clock.ElapsedMilliseconds;
        fraction = Math.Clamp(fraction, 0, 1);
        const int width = 30;
        var filled = (int)Math.Round(fraction * width);
        var eta = fraction > 0.01 ? TimeSpan.FromSeconds(_clock.Elapsed.TotalSeconds * (1 - fraction) / fraction) : (TimeSpan?)null;
        var line = $"\r{_label} [{new string('#', filled)}{new string('.', width - filled)}] {fraction * 100,5:0.0}%"
            + (eta is { } e ? $"  eta {e:mm\\:ss}" : "") + (status is null ? "" : "  " + status);
        Console.Error.Write(line.Length > 118 ? line[..118] : line.PadRight(Math.Min(118, line.Length + 4)));
        _drawn = true;
    }

    public void Dispose()
    {
        if (_drawn)
        {
            Console.Error.Write("\r" + new string(' ', 118) + "\r");
            _drawn = false;
        }
    }
}
