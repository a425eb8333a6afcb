using Fleet.Cli.Output;
using Fleet.Data;
using Fleet.Estimation.Anchors;
using Fleet.Estimation.Evaluation;
using Fleet.Estimation.Measurements;

namespace Fleet.Cli.Commands;

/// <summary>Reads a measurement log and replays it through one filter per robot; shared by replay, demo and bias eval.</summary>
internal static class ReplayRunner
{
    /// <summary>Replays a log file, showing progress on a terminal and reporting bad lines on stderr (file:line: message).</summary>
    public static EvaluationResult ReplayFile(SiteLayout site, string logPath, EvaluationSettings settings, string label = "replay")
    {
        RequireLog(logPath);
        var diagnostics = new DiagnosticPrinter();
        using var stream = new FileStream(logPath, FileMode.Open, FileAccess.Read, FileShare.Read, 1 << 16, FileOptions.SequentialScan);
        using var progress = new TerminalProgress(label);
        var evaluation = new TrackingEvaluation(site, settings);
        var length = Math.Max(1, stream.Length);
        var records = IsRecording(logPath)
            ? Server.Recording.RecordingReader.ReadRecords(logPath, diagnostics.Report)
            : MeasurementLog.Read(stream, logPath, diagnostics.Report);
        foreach (var record in records)
        {
            evaluation.Add(record);
            progress.Report((double)stream.Position / length);
        }

        progress.Dispose();
        diagnostics.Summarise();
        return evaluation.Finish();
    }

    /// <summary>
    /// Reads a log lazily, reporting bad lines on stderr the same way as <see cref="ReplayFile"/>. A missing file fails
    /// at once, not on first enumeration.
    /// </summary>
    public static IEnumerable<ObservationRecord> ReadLog(string logPath)
    {
        RequireLog(logPath);
        return ReadLogCore(logPath);
    }

    private static IEnumerable<ObservationRecord> ReadLogCore(string logPath)
    {
        var diagnostics = new DiagnosticPrinter();
        var records = IsRecording(logPath)
            ? Server.Recording.RecordingReader.ReadRecords(logPath, diagnostics.Report)
            : MeasurementLog.Read(logPath, diagnostics.Report);
        foreach (var record in records)
        {
            yield return record;
        }

        diagnostics.Summarise();
    }

    /// <summary>A server ingest recording (<c>.fleetrec</c>) rather than a JSON Lines log; it carries no robot lines or truth.</summary>
    private static bool IsRecording(string logPath) =>
        logPath.EndsWith(Server.Recording.IngestRecorder.FileExtension, StringComparison.OrdinalIgnoreCase);

    private static void RequireLog(string logPath)
    {
        if (!File.Exists(logPath))
        {
            throw new CliException($"{logPath}: no such measurement log");
        }
    }

    /// <summary>Replays records already in memory (the demo's simulated run).</summary>
    public static EvaluationResult Replay(SiteLayout site, IEnumerable<ObservationRecord> records, EvaluationSettings settings)
    {
        var evaluation = new TrackingEvaluation(site, settings);
        foreach (var record in records)
        {
            evaluation.Add(record);
        }

        return evaluation.Finish();
    }

    /// <summary>Prints the first diagnostics in full and counts the rest, so a badly broken file cannot flood the terminal.</summary>
    private sealed class DiagnosticPrinter
    {
        private const int Shown = 20;
        private int _count;

        public void Report(DataDiagnostic diagnostic)
        {
            if (_count++ < Shown)
            {
                Console.Error.WriteLine(diagnostic.ToString());
            }
        }

        public void Summarise()
        {
            if (_count > Shown)
            {
                Console.Error.WriteLine($"... and {_count - Shown} more problems in the log");
            }
        }
    }
}
