using System.CommandLine;
using System.Globalization;
using Fleet.Cli.Output;
using Fleet.Estimation.Evaluation;
using Fleet.Simulation;

namespace Fleet.Cli.Commands;

/// <summary>
/// `fleet demo`: the main job on an embedded default — simulates the invented Harbor Point DC with NLOS-heavy
/// racks, tracks every robot with the robust filter, and shows accuracy against truth beside a plain least-squares
/// filter on the same data.
/// </summary>
internal static class DemoCommand
{
    public static Command Create()
    {
        var robots = new Option<int>("--robots") { Description = "Number of simulated robots", DefaultValueFactory = _ => 12 };
        var duration = new Option<double>("--duration") { Description = "Simulated time (s)", DefaultValueFactory = _ => 90 };
        var seed = new Option<int>("--seed") { Description = "Random seed", DefaultValueFactory = _ => 7 };
        var command = new Command("demo", "Run Fleet on an embedded invented warehouse and show accuracy against truth.") { robots, duration, seed };
        command.SetAction(parse => FleetCommandLine.Guarded(() =>
        {
            Console.WriteLine(SafetyNotice.Text);
            Console.WriteLine();
            foreach (var layout in new[] { WarehouseSites.Tall, WarehouseSites.Low })
            {
                var options = new SimulationOptions
                {
                    Layout = layout,
                    RobotCount = parse.GetValue(robots),
                    DurationSeconds = parse.GetValue(duration),
                    Seed = parse.GetValue(seed),
                };
                var generator = new MeasurementGenerator(options);
                Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
                    $"== Harbor Point DC, layout {layout}: {generator.Layout.Anchors.Count} anchors, {options.RobotCount} robots, {options.DurationSeconds:0} s"));
                foreach (var warning in generator.Layout.Anchors.Warnings)
                {
                    Console.WriteLine($"   site warning: {warning.Message}");
                }

                var robust = Run(generator, "huber");
                var plain = Run(generator, FilterChoice.Plain);
                Console.Write(ReplayReport.Table(robust));
                Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
                    $"   robust horizontal RMSE {robust.Overall.RmseHorizontal:0.000} m vs plain least squares {plain.Overall.RmseHorizontal:0.000} m "
                    + $"({Ratio(robust.Overall.RmseHorizontal, plain.Overall.RmseHorizontal)}); {robust.Overall.RejectionRate * 100:0.0}% of TDOAs rejected"));
                Console.WriteLine();
            }

            Console.WriteLine("Next: `fleet simulate` writes these runs to files; `fleet replay SITE LOG` scores any log with truth lines.");
            return 0;
        }));
        return command;
    }

    private static EvaluationResult Run(MeasurementGenerator generator, string update) =>
        ReplayRunner.Replay(generator.Layout, generator.Generate(),
            FilterChoice.Settings(FilterChoice.OptionsFactory(update, new Estimation.Filtering.FilterOptions().TdoaSigmaMetres, 0.1)));

    private static string Ratio(double robust, double plain) =>
        plain > 0 ? string.Create(CultureInfo.InvariantCulture, $"{robust / plain:0.00}× the error") : "n/a";
}
