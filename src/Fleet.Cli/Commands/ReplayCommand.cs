using System.CommandLine;
using Fleet.Cli.Output;
using Fleet.Data;

namespace Fleet.Cli.Commands;

/// <summary>`fleet replay SITE LOG`: one filter per robot over a log; accuracy against its truth lines.</summary>
internal static class ReplayCommand
{
    public static Command Create()
    {
        var site = new Argument<FileInfo>("SITE") { Description = "Site file (JSON or YAML)" };
        var log = new Argument<FileInfo>("LOG") { Description = "Measurement log (JSON Lines) with truth lines" };
        var json = new Option<bool>("--json") { Description = "Print one JSON object instead of the table" };
        var biasModel = new Option<FileInfo>("--bias-model") { Description = "Correct every TDOA with this bias model before the update" };
        var filter = new FilterChoice();
        var report = new ReplayReportOptions();

        var command = new Command("replay", "Replay a measurement log through one robust filter per robot and score it against truth.")
        {
            site, log, json, biasModel,
        };
        filter.AddTo(command);
        report.AddTo(command);
        command.SetAction(parse => FleetCommandLine.Guarded(() =>
        {
            var layout = SiteFile.Read(parse.GetValue(site)!.FullName);
            var settings = FilterChoice.Settings(filter.OptionsFactory(parse));
            var modelPath = parse.GetValue(biasModel)?.FullName;
            if (modelPath is not null)
            {
                var model = BiasCommand.LoadModel(modelPath).Model;
                settings = settings with { BiasModelFactory = model.Clone };
            }

            var result = ReplayRunner.ReplayFile(layout, parse.GetValue(log)!.FullName, settings);
            report.WriteIfRequested(parse, layout, parse.GetValue(log)!.FullName, result, filter, modelPath);
            var update = parse.GetValue(filter.Update)!;
            if (parse.GetValue(json))
            {
                Console.WriteLine(CliJson.Serialize(ReplayReport.Json(result, update, modelPath)));
            }
            else
            {
                Console.WriteLine($"site {layout.SiteId}: {layout.Anchors.Count} anchors; update {update}; bias model {modelPath ?? "none"}; {result.Records} records");
                Console.Write(ReplayReport.Table(result));
            }

            return 0;
        }));
        return command;
    }
}
