using System.CommandLine;
using System.Text;
using Fleet.Estimation.Anchors;
using Fleet.Estimation.Evaluation;
using Fleet.Reports.Tracking;

namespace Fleet.Cli.Commands;

/// <summary>
/// `fleet replay … --report out.html [--compare-update U] [--compare-bias-model M2]`: the replay as an HTML report,
/// optionally beside a second configuration (B) replayed on the same log. The table and --json output stay those of A.
/// </summary>
internal sealed class ReplayReportOptions
{
    public Option<FileInfo> Report { get; } = new("--report") { Description = "Also write a self-contained HTML report of the replay here" };

    public Option<string> CompareUpdate { get; } = new("--compare-update")
    {
        Description = "Report: replay a second configuration (B) with this update (huber, cauchy, tukey, plain) for an A/B comparison",
    };

    public Option<FileInfo> CompareBiasModel { get; } = new("--compare-bias-model")
    {
        Description = "Report: replay a second configuration (B) with this bias model for an A/B comparison",
    };

    public ReplayReportOptions() => CompareUpdate.AcceptOnlyFromAmong("huber", "cauchy", "tukey", FilterChoice.Plain);

    public void AddTo(Command command)
    {
        command.Options.Add(Report);
        command.Options.Add(CompareUpdate);
        command.Options.Add(CompareBiasModel);
        command.Validators.Add(result =>
        {
            if (result.GetValue(Report) is null && (result.GetValue(CompareUpdate) is not null || result.GetValue(CompareBiasModel) is not null))
            {
                result.AddError("--compare-update and --compare-bias-model need --report: the comparison is shown in the HTML report");
            }
        });
    }

    /// <summary>Writes the report when --report was given (replaying B first when a comparison was asked for).</summary>
    public void WriteIfRequested(ParseResult parse, SiteLayout layout, string logPath, EvaluationResult resultA, FilterChoice filter, string? modelPath)
    {
        var report = parse.GetValue(Report);
        if (report is null)
        {
            return;
        }

        var update = parse.GetValue(filter.Update)!;
        var runs = new List<TrackingRun> { new("A", Describe(update, modelPath), resultA) };
        var compareUpdate = parse.GetValue(CompareUpdate);
        var compareModel = parse.GetValue(CompareBiasModel)?.FullName;
        if (compareUpdate is not null || compareModel is not null)
        {
            var updateB = compareUpdate ?? update;
            var modelB = compareModel ?? modelPath;
            var settings = FilterChoice.Settings(FilterChoice.OptionsFactory(updateB, parse.GetValue(filter.Sigma), parse.GetValue(filter.ReorderLag)));
            if (modelB is not null)
            {
                settings = settings with { BiasModelFactory = BiasCommand.LoadModel(modelB).Model.Clone };
            }

            runs.Add(new TrackingRun("B", Describe(updateB, modelB), ReplayRunner.ReplayFile(layout, logPath, settings, "replay B")));
        }

        var html = ReplayHtmlReport.Render(new ReplayReportInput(layout.SiteId, Path.GetFileName(logPath), runs)
        {
            Records = resultA.Records,
            Notes = [$"site {layout.SiteId}: {layout.Anchors.Count} anchors · filter TDOA σ {parse.GetValue(filter.Sigma).ToString(System.Globalization.CultureInfo.InvariantCulture)} m"],
        });
        File.WriteAllText(report.FullName, html, new UTF8Encoding(false));

        // stderr, so --json output on stdout stays one JSON object.
        Console.Error.WriteLine($"wrote {report.FullName} ({string.Join(" vs ", runs.Select(r => $"{r.Label}: {r.Description}"))})");
    }

    private static string Describe(string update, string? modelPath) =>
        $"{update} update, " + (modelPath is null ? "no bias model" : $"bias model {Path.GetFileName(modelPath)}");
}
