using System.CommandLine;
using System.Globalization;
using Fleet.Cli.Output;
using Fleet.Data;
using Fleet.Estimation.Measurements;
using Fleet.Simulation;

namespace Fleet.Cli.Commands;

/// <summary>`fleet simulate`: writes an invented site file and a measurement log with truth lines.</summary>
internal static class SimulateCommand
{
    public static Command Create()
    {
        var layout = new Option<string>("--layout")
        {
            Description = "Anchor layout of the invented Harbor Point DC hall",
            DefaultValueFactory = _ => WarehouseSites.Tall,
        };
        layout.AcceptOnlyFromAmong([.. WarehouseSites.Names]);
        var robots = new Option<int>("--robots") { Description = "Number of robots", DefaultValueFactory = _ => 8 };
        var duration = new Option<double>("--duration") { Description = "Simulated time (s)", DefaultValueFactory = _ => 120 };
        var seed = new Option<int>("--seed") { Description = "Random seed: the same seed gives the same files", DefaultValueFactory = _ => 1 };
        var noise = new Option<double>("--noise") { Description = "Gaussian ranging noise per link, 1-σ (m)", DefaultValueFactory = _ => new SimulationOptions().NoiseSigmaMetres };
        var noNlos = new Option<bool>("--no-nlos") { Description = "No NLOS excess delay and no multipath outliers" };
        var noBias = new Option<bool>("--no-bias") { Description = "No pose-dependent ranging bias" };
        var multipath = new Option<double>("--multipath")
        {
            Description = "Probability that a link carries a multipath outlier (a late reflection, 0–1)",
            DefaultValueFactory = _ => new SimulationOptions().MultipathOutlierProbability,
        };
        var multipathExcess = new Option<double>("--multipath-excess")
        {
            Description = "Mean extra path length of a multipath outlier beyond its minimum (m)",
            DefaultValueFactory = _ => new SimulationOptions().MultipathMeanExcessMetres,
        };
        var siteOut = new Option<FileInfo>("--site-out") { Description = "Site file to write (JSON)", DefaultValueFactory = _ => new FileInfo("site.json") };
        var logOut = new Option<FileInfo>("--log-out") { Description = "Measurement log to write (JSON Lines)", DefaultValueFactory = _ => new FileInfo("measurements.jsonl") };

        var command = new Command("simulate", "Write an invented warehouse site file and a simulated measurement log with truth lines.")
        {
            layout, robots, duration, seed, noise, noNlos, noBias, multipath, multipathExcess, siteOut, logOut,
        };
        command.SetAction(parse => FleetCommandLine.Guarded(() =>
        {
            var options = new SimulationOptions
            {
                Layout = parse.GetValue(layout)!,
                RobotCount = parse.GetValue(robots),
                DurationSeconds = parse.GetValue(duration),
                Seed = parse.GetValue(seed),
                NoiseSigmaMetres = parse.GetValue(noise),
                NlosEnabled = !parse.GetValue(noNlos),
                MultipathOutlierProbability = parse.GetValue(noNlos) ? 0 : parse.GetValue(multipath),
                MultipathMeanExcessMetres = parse.GetValue(multipathExcess),
                BiasAmplitudeMetres = parse.GetValue(noBias) ? 0 : new SimulationOptions().BiasAmplitudeMetres,
            };
            try
            {
                options.Validate();
            }
            catch (ArgumentException e)
            {
                throw new CliException(e.Message);
            }

            var sitePath = parse.GetValue(siteOut)!.FullName;
            var logPath = parse.GetValue(logOut)!.FullName;
            var generator = new MeasurementGenerator(options);
            SiteFile.Write(sitePath, generator.Layout);

            var counts = new Dictionary<string, long>(StringComparer.Ordinal);
            using var progress = new TerminalProgress("simulate");
            var written = MeasurementLog.Write(logPath, Count(generator.Generate(), counts, progress, options.DurationSeconds));
            progress.Dispose();

            Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
                $"wrote {sitePath} ({generator.Layout.Anchors.Count} anchors, {generator.Layout.Racks.Count} racks)"));
            Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
                $"wrote {logPath}: {written} records ({Get(counts, "robot")} robots, {Get(counts, "tdoa")} tdoa, {Get(counts, "odom")} odom, {Get(counts, "truth")} truth)"));
            foreach (var warning in generator.Layout.Anchors.Warnings)
            {
                Console.WriteLine($"site warning: {warning.Message}");
            }

            return 0;
        }));
        return command;
    }

    private static long Get(Dictionary<string, long> counts, string key) => counts.GetValueOrDefault(key);

    private static IEnumerable<ObservationRecord> Count(IEnumerable<ObservationRecord> records, Dictionary<string, long> counts, TerminalProgress progress, double duration)
    {
        foreach (var record in records)
        {
            var (kind, time) = record switch
            {
                TdoaRecord t => ("tdoa", t.Time),
                OdometryRecord o => ("odom", o.Time),
                TruthRecord t => ("truth", t.Time),
                _ => ("robot", 0.0),
            };
            counts[kind] = counts.GetValueOrDefault(kind) + 1;
            progress.Report(time / duration);
            yield return record;
        }
    }
}
