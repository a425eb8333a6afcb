using System.CommandLine;
using System.Globalization;
using System.Text;
using Fleet.Data;
using Fleet.Estimation.Anchors;
using Fleet.Estimation.Bias.Training;
using Fleet.Estimation.Evaluation;
using Fleet.Estimation.Filtering;
using Fleet.Estimation.Measurements;
using Fleet.Reports.Site;
using Fleet.Reports.Tracking;

namespace Fleet.Cli.Commands;

/// <summary>`fleet site report`: the commissioning report of a site, optionally with a log (and bias model) for validation.</summary>
internal static class SiteCommand
{
    public static Command Create()
    {
        var site = new Command("site", "Inspect a site: commissioning reports.");
        site.Subcommands.Add(CreateReport());
        return site;
    }

    private static Command CreateReport()
    {
        var defaults = new SiteGeometryOptions();
        var siteFile = new Argument<FileInfo>("SITE") { Description = "Site file (JSON or YAML)" };
        var log = new Option<FileInfo>("--log") { Description = "Measurement log; with truth lines it adds residuals and tracking accuracy" };
        var model = new Option<FileInfo>("--bias-model") { Description = "Bias model to validate against the log's truth (needs --log)" };
        var heights = new Option<string>("--heights") { Description = "Tag heights (m), comma-separated", DefaultValueFactory = _ => "0.5" };
        var sigma = new Option<double>("--sigma") { Description = "Single-link range noise 1-σ (m) for the CRLB maps", DefaultValueFactory = _ => defaults.SigmaToaMetres };
        var step = new Option<double>("--grid-step") { Description = "Map cell size (m)", DefaultValueFactory = _ => defaults.GridStepMetres };
        var range = new Option<double>("--max-range") { Description = "Anchors farther than this from the tag are not heard (m)", DefaultValueFactory = _ => defaults.MaxRangeMetres };
        var hdopLimit = new Option<double>("--hdop-limit") { Description = "Cells with a larger height-known HDOP are coverage holes", DefaultValueFactory = _ => defaults.HdopLimit };
        var minAnchors = new Option<int>("--min-anchors") { Description = "Cells hearing fewer anchors are coverage holes", DefaultValueFactory = _ => defaults.MinimumAnchors };
        var rackTolerance = new Option<double>("--rack-tolerance")
        {
            Description = "An anchor counts when its line to the tag runs through at most this much rack (m); 0: clear line of sight only",
            DefaultValueFactory = _ => defaults.RackPathToleranceMetres,
        };
        var update = new Option<string>("--update") { Description = "Filter update for the accuracy replay: huber, cauchy, tukey or plain", DefaultValueFactory = _ => "huber" };
        update.AcceptOnlyFromAmong("huber", "cauchy", "tukey", FilterChoice.Plain);
        var output = new Option<FileInfo>("--out") { Description = "HTML report to write", Required = true };

        var command = new Command("report", "Write a self-contained HTML commissioning report: DOP/CRLB maps, coverage holes, geometry warnings, anchors; with a log, residuals and accuracy.")
        {
            siteFile, log, model, heights, sigma, step, range, hdopLimit, minAnchors, rackTolerance, update, output,
        };
        command.Validators.Add(result =>
        {
            if (result.GetValue(model) is not null && result.GetValue(log) is null)
            {
                result.AddError("--bias-model needs --log: the model is validated against a log's truth lines");
            }
        });
        command.SetAction(parse => FleetCommandLine.Guarded(() =>
        {
            var sitePath = parse.GetValue(siteFile)!.FullName;
            var layout = SiteFile.Read(sitePath);
            var options = new SiteGeometryOptions
            {
                TagHeights = ParseHeights(parse.GetValue(heights)!),
                SigmaToaMetres = Positive(parse.GetValue(sigma), "--sigma"),
                GridStepMetres = Positive(parse.GetValue(step), "--grid-step"),
                MaxRangeMetres = Positive(parse.GetValue(range), "--max-range"),
                HdopLimit = Positive(parse.GetValue(hdopLimit), "--hdop-limit"),
                MinimumAnchors = parse.GetValue(minAnchors),
                RackPathToleranceMetres = NonNegative(parse.GetValue(rackTolerance), "--rack-tolerance"),
            };
            var cells = Math.Ceiling(FloorArea(layout) / (options.GridStepMetres * options.GridStepMetres));
            if (cells > 250_000)
            {
                throw new CliException(string.Create(CultureInfo.InvariantCulture, $"--grid-step {options.GridStepMetres} m gives {cells:0} cells per map; use a coarser step"));
            }

            var geometry = SiteGeometryAnalysis.Analyse(layout, options);
            var input = new SiteReportInput(geometry, sitePath);
            var logPath = parse.GetValue(log)?.FullName;
            if (logPath is not null)
            {
                input = WithLog(input, layout, logPath, parse.GetValue(model)?.FullName, parse.GetValue(update)!);
            }

            var outPath = parse.GetValue(output)!.FullName;
            File.WriteAllText(outPath, SiteReport.Render(input), new UTF8Encoding(false));
            var warnings = geometry.Findings.Count(f => f.Severity == "warning");
            Console.WriteLine($"wrote {outPath}: site {layout.SiteId}, {geometry.Heights.Count} tag height(s), {warnings} geometry warning(s)"
                + (input.Validation is null ? string.Empty : ", validation against truth"));
            return 0;
        }));
        return command;
    }

    private static SiteReportInput WithLog(SiteReportInput input, SiteLayout layout, string logPath, string? modelPath, string update)
    {
        var records = ReplayRunner.ReadLog(logPath).ToList();
        input = input with { Log = LogSummary.From(records), LogSource = logPath };
        var samples = TrainingSampleExtractor.Extract(layout, records, group: layout.SiteId).Samples;
        if (samples.Count == 0)
        {
            var note = "The log has no TDOAs paired with truth lines, so residuals and tracking accuracy are not shown.";
            if (modelPath is not null)
            {
                note += " The bias model could not be validated.";
            }

            return input with { Notes = [note] };
        }

        var model = modelPath is null ? null : BiasCommand.LoadModel(modelPath).Model;
        var (perAnchor, overall) = BiasResidualStatistics.Compute(samples, model);
        var defaults = new FilterOptions();
        var settings = FilterChoice.Settings(FilterChoice.OptionsFactory(update, defaults.TdoaSigmaMetres, defaults.ReorderLagSeconds));
        var without = new TrackingRun("A", $"{update} update, no bias model", ReplayRunner.Replay(layout, records, settings));
        TrackingRun? with = null;
        if (model is not null)
        {
            with = new TrackingRun("B", $"{update} update, bias model {Path.GetFileName(modelPath)}",
                ReplayRunner.Replay(layout, records, settings with { BiasModelFactory = model.Clone }));
        }

        return input with { Validation = new BiasValidation(perAnchor, overall, samples.Count, without, with, modelPath is null ? null : Path.GetFileName(modelPath)) };
    }

    private static double FloorArea(SiteLayout layout)
    {
        var floor = Reports.Rendering.FloorPlanScene.FloorOf(layout);
        return Math.Max(1, floor.Width) * Math.Max(1, floor.Height);
    }

    private static double Positive(double value, string name) =>
        value > 0 && double.IsFinite(value) ? value : throw new CliException($"{name} must be a positive number (got {value.ToString(CultureInfo.InvariantCulture)})");

    private static double NonNegative(double value, string name) =>
        value >= 0 && !double.IsNaN(value) ? value : throw new CliException($"{name} must be zero or more (got {value.ToString(CultureInfo.InvariantCulture)})");

    private static double[] ParseHeights(string text)
    {
        var parts = text.Split(',', StringSplitOptions.RemoveEmptyEntries | StringSplitOptions.TrimEntries);
        var values = new double[parts.Length];
        for (var i = 0; i < parts.Length; i++)
        {
            if (!double.TryParse(parts[i], NumberStyles.Float, CultureInfo.InvariantCulture, out values[i]) || !double.IsFinite(values[i]))
            {
                throw new CliException($"--heights: '{parts[i]}' is not a height in metres");
            }
        }

        return values.Length == 0 ? throw new CliException("--heights: give at least one tag height (m)") : values;
    }
}
