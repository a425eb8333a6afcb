using System.CommandLine;
using System.Globalization;
using Fleet.Cli.Output;
using Fleet.Data;
using Fleet.Data.BiasModels;
using Fleet.Estimation.Anchors;
using Fleet.Estimation.Bias;
using Fleet.Estimation.Bias.Training;
using Fleet.Estimation.Evaluation;
using Fleet.Estimation.Measurements;

namespace Fleet.Cli.Commands;

/// <summary>`fleet bias train | eval | export-onnx`: the per-site learned bias model, from ground-truth runs to rollout.</summary>
internal static class BiasCommand
{
    public static Command Create()
    {
        var bias = new Command("bias", "Train, evaluate and export per-site learned TDOA bias models.");
        bias.Subcommands.Add(CreateTrain());
        bias.Subcommands.Add(CreateEval());
        bias.Subcommands.Add(CreateExport());
        return bias;
    }

    private static Command CreateTrain()
    {
        var sites = new Option<FileInfo[]>("--site") { Description = "Site file; repeat together with --log, paired in order", Required = true };
        var logs = new Option<FileInfo[]>("--log") { Description = "Measurement log with truth lines; one per --site", Required = true };
        var output = new Option<FileInfo>("--out") { Description = "Model file to write", Required = true };
        var seed = new Option<int>("--seed") { Description = "Seed: the same data and seed give the same model", DefaultValueFactory = _ => 1 };
        var hidden = new Option<string>("--hidden") { Description = "Hidden layer widths, comma-separated", DefaultValueFactory = _ => "30,30,30" };
        var epochs = new Option<int>("--epochs") { Description = "Most epochs (early stopping usually ends sooner)", DefaultValueFactory = _ => new BiasTrainerOptions().MaxEpochs };
        var noOrientation = new Option<bool>("--no-anchor-orientation") { Description = "Ablation: leave anchor orientation out of the features" };
        var keepBlocked = new Option<bool>("--keep-blocked") { Description = "Also train on links that cross a rack of the site file (normally dropped as NLOS)" };

        var command = new Command("train", "Learn a site bias model from logs with truth lines (target: measured minus true TDOA).")
        {
            sites, logs, output, seed, hidden, epochs, noOrientation, keepBlocked,
        };
        command.SetAction(parse => FleetCommandLine.Guarded(() =>
        {
            var pairs = Pairs(parse.GetValue(sites)!, parse.GetValue(logs)!);
            var samples = new List<TdoaTrainingSample>();
            foreach (var (sitePath, logPath) in pairs)
            {
                var layout = SiteFile.Read(sitePath);
                var extraction = TrainingSampleExtractor.Extract(layout, ReplayRunner.ReadLog(logPath), group: layout.SiteId);
                var kept = parse.GetValue(keepBlocked) ? [.. extraction.Samples] : LineOfSightScreen.Keep(layout, extraction.Samples);
                samples.AddRange(kept);
                Console.Error.WriteLine(string.Create(CultureInfo.InvariantCulture,
                    $"{logPath}: {kept.Count} samples from {extraction.TdoaRecords} TDOAs (site {layout.SiteId}; dropped: {extraction.Samples.Count - kept.Count} through racks, {extraction.SkippedNoTruth + extraction.SkippedTruthGap} without truth, {extraction.SkippedUnknownAnchor} unknown anchor)"));
            }

            if (samples.Count == 0)
            {
                throw new CliException("no training samples: the logs need TDOA records with truth lines of the same robot around them");
            }

            var options = new BiasTrainerOptions
            {
                Seed = parse.GetValue(seed),
                HiddenWidths = ParseWidths(parse.GetValue(hidden)!),
                MaxEpochs = parse.GetValue(epochs),
                FeatureSet = parse.GetValue(noOrientation) ? LinkFeatureSet.WithoutAnchorOrientation : LinkFeatureSet.Full,
            };

            BiasTrainingResult result;
            using (var bar = new TerminalProgress("train"))
            {
                result = BiasTrainer.Train(samples, options, new TrainingProgressBar(bar));
            }

            var report = result.Report;
            var metadata = BiasModelMetadata.FromReport(report, DateTimeOffset.UtcNow);
            var outPath = parse.GetValue(output)!.FullName;
            BiasModelFile.Write(outPath, result.Model, metadata);
            Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
                $"wrote {outPath}: {string.Join('×', options.HiddenWidths)} {options.Activation} network, features {options.FeatureSet}"));
            Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
                $"samples: {report.TrainingSamples} training, {report.ValidationSamples} validation ({report.ValidationSplit}: held out {string.Join(", ", report.ValidationGroups)}), {report.ScreenedSamples} screened as outliers"));
            Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
                $"validation TDOA error (robust 1-σ): {report.ValidationRobustRmseBefore:0.0000} m → {report.ValidationRobustRmseAfter:0.0000} m after correction; RMSE {report.ValidationRmseBefore:0.0000} → {report.ValidationRmseAfter:0.0000} m"));
            Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
                $"epochs: {report.EpochsRun} (best {report.BestEpoch}{(report.StoppedEarly ? ", stopped early" : "")}) in {report.Duration.TotalSeconds:0.0} s"));
            return 0;
        }));
        return command;
    }

    private static Command CreateEval()
    {
        var model = new Option<FileInfo>("--model") { Description = "Bias model file", Required = true };
        var site = new Option<FileInfo>("--site") { Description = "Site file", Required = true };
        var log = new Option<FileInfo>("--log") { Description = "Measurement log with truth lines", Required = true };
        var json = new Option<bool>("--json") { Description = "Print one JSON object" };
        var filter = new FilterChoice();
        var command = new Command("eval", "Per-anchor residuals before and after correction, and position RMSE with and without the model.")
        {
            model, site, log, json,
        };
        filter.AddTo(command);
        command.SetAction(parse => FleetCommandLine.Guarded(() =>
        {
            var modelPath = parse.GetValue(model)!.FullName;
            var contents = LoadModel(modelPath);
            var layout = SiteFile.Read(parse.GetValue(site)!.FullName);
            var logPath = parse.GetValue(log)!.FullName;
            var records = ReplayRunner.ReadLog(logPath).ToList();

            var samples = TrainingSampleExtractor.Extract(layout, records, group: layout.SiteId).Samples;
            var (perAnchor, overall) = BiasResidualStatistics.Compute(samples, contents.Model);

            var options = filter.OptionsFactory(parse);
            var without = ReplayRunner.Replay(layout, records, FilterChoice.Settings(options));
            var with = ReplayRunner.Replay(layout, records, FilterChoice.Settings(options) with { BiasModelFactory = contents.Model.Clone });
            var gain = 1 - (with.Overall.RmseHorizontal / without.Overall.RmseHorizontal);

            if (parse.GetValue(json))
            {
                Console.WriteLine(CliJson.Serialize(new Dictionary<string, object?>
                {
                    ["model"] = modelPath,
                    ["site"] = layout.SiteId,
                    ["samples"] = samples.Count,
                    ["residuals"] = Residual(overall),
                    ["anchors"] = perAnchor.Select(Residual).ToArray(),
                    ["without_model"] = ReplayReport.Json(without, parse.GetValue(filter.Update)!, null),
                    ["with_model"] = ReplayReport.Json(with, parse.GetValue(filter.Update)!, modelPath),
                    ["rmse_horizontal_reduction"] = CliJson.Round(gain),
                }));
                return 0;
            }

            var table = new TextTable("anchor", "tdoas", "mean before m", "rmse before m", "σ before m", "mean after m", "rmse after m", "σ after m");
            foreach (var a in perAnchor.Append(overall))
            {
                table.AddRow(a.AnchorId, a.Count, a.MeanBefore, a.RmseBefore, a.RobustSigmaBefore, a.MeanAfter, a.RmseAfter, a.RobustSigmaAfter);
            }

            Console.Write(table.ToString());
            Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
                $"position RMSE horizontal {without.Overall.RmseHorizontal:0.000} m without the model, {with.Overall.RmseHorizontal:0.000} m with it ({gain * 100:0.0}% lower); "
                + $"vertical {without.Overall.RmseVertical:0.000} → {with.Overall.RmseVertical:0.000} m"));
            return 0;
        }));
        return command;
    }

    private static Command CreateExport()
    {
        var model = new Argument<FileInfo>("MODEL") { Description = "Bias model file" };
        var output = new Argument<FileInfo>("OUT") { Description = "ONNX file to write" };
        var command = new Command("export-onnx", "Write the equivalent ONNX model (input \"features\" [N, F], output \"link_bias\" [N, 1]).") { model, output };
        command.SetAction(parse => FleetCommandLine.Guarded(() =>
        {
            var contents = LoadModel(parse.GetValue(model)!.FullName);
            var outPath = parse.GetValue(output)!.FullName;
            OnnxExport.Write(outPath, contents.Model, $"Fleet link-bias model; features: {string.Join(", ", LinkFeatures.Names)}");
            Console.WriteLine($"wrote {outPath} ({contents.Model.InputCount} inputs, {contents.Model.ParameterCount} parameters)");
            return 0;
        }));
        return command;
    }

    /// <summary>Loads a model file; a bad file is a user error with the file named, never a half-loaded model.</summary>
    public static BiasModelFileContents LoadModel(string path)
    {
        try
        {
            return BiasModelFile.Read(path);
        }
        catch (BiasModelFileException e)
        {
            throw new CliException(e.Message);
        }
    }

    private static Dictionary<string, object> Residual(AnchorResidualStatistics a) => new()
    {
        ["anchor"] = a.AnchorId,
        ["tdoas"] = a.Count,
        ["mean_before_m"] = CliJson.Round(a.MeanBefore),
        ["rmse_before_m"] = CliJson.Round(a.RmseBefore),
        ["robust_sigma_before_m"] = CliJson.Round(a.RobustSigmaBefore),
        ["mean_after_m"] = CliJson.Round(a.MeanAfter),
        ["rmse_after_m"] = CliJson.Round(a.RmseAfter),
        ["robust_sigma_after_m"] = CliJson.Round(a.RobustSigmaAfter),
    };

    private static List<(string Site, string Log)> Pairs(FileInfo[] sites, FileInfo[] logs)
    {
        if (sites.Length != logs.Length)
        {
            throw new CliException($"--site and --log pair up in order: got {sites.Length} site(s) and {logs.Length} log(s)");
        }

        return sites.Zip(logs, (s, l) => (s.FullName, l.FullName)).ToList();
    }

    private static int[] ParseWidths(string text)
    {
        var parts = text.Split(',', StringSplitOptions.RemoveEmptyEntries | StringSplitOptions.TrimEntries);
        var widths = new int[parts.Length];
        for (var i = 0; i < parts.Length; i++)
        {
            if (!int.TryParse(parts[i], NumberStyles.None, CultureInfo.InvariantCulture, out widths[i]) || widths[i] is < 1 or > 4096)
            {
                throw new CliException($"--hidden: '{parts[i]}' is not a layer width (1–4096)");
            }
        }

        return parts.Length == 0 ? throw new CliException("--hidden: give at least one layer width") : widths;
    }

    /// <summary>Draws training progress synchronously (Progress&lt;T&gt; would post to the thread pool and reorder lines).</summary>
    private sealed class TrainingProgressBar(TerminalProgress bar) : IProgress<TrainingProgress>
    {
        public void Report(TrainingProgress value) => bar.Report(
            (double)value.Epoch / value.MaxEpochs,
            string.Create(CultureInfo.InvariantCulture,
                $"epoch {value.Epoch}/{value.MaxEpochs}  loss {value.TrainLoss:0.00000}  val σ {value.ValidationRobustRmse:0.0000} m (best {value.BestValidationRobustRmse:0.0000} @ {value.BestEpoch})"));
    }
}
