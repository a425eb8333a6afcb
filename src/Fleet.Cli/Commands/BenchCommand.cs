using System.CommandLine;
using System.Globalization;
using Fleet.Cli.Output;
using Fleet.Performance;

namespace Fleet.Cli.Commands;

/// <summary>`fleet bench …`: side-by-side ratios measured in one process run.</summary>
internal static class BenchCommand
{
    public static Command Create()
    {
        var bench = new Command("bench", "Measure Fleet against reference implementations in the same run and print ratios.");
        bench.Subcommands.Add(CreateFilter());
        bench.Subcommands.Add(CreateIngest());
        bench.Subcommands.Add(CreateSoak());
        return bench;
    }

    private static Command CreateIngest()
    {
        var json = new Option<bool>("--json") { Description = "Print one JSON object" };
        var robots = new Option<int>("--robots") { Description = "Simulated robots", DefaultValueFactory = _ => new Fleet.Server.Benchmarking.IngestBenchmarkOptions().Robots };
        var duration = new Option<double>("--duration") { Description = "Simulated seconds of saturated ingest per round and server", DefaultValueFactory = _ => new Fleet.Server.Benchmarking.IngestBenchmarkOptions().DurationSeconds };
        var rounds = new Option<int>("--rounds") { Description = "Throughput rounds alternating between the two servers (best of each reported)", DefaultValueFactory = _ => new Fleet.Server.Benchmarking.IngestBenchmarkOptions().Rounds };
        var command = new Command("ingest", "A real server and a real gRPC client on loopback against a no-op ingest endpoint over the same transport, in one run.") { json, robots, duration, rounds };
        command.SetAction(async (parse, cancellationToken) =>
        {
            var options = new Fleet.Server.Benchmarking.IngestBenchmarkOptions { Robots = parse.GetValue(robots), DurationSeconds = parse.GetValue(duration), Rounds = parse.GetValue(rounds) };
            var result = await Fleet.Server.Benchmarking.IngestBenchmark.RunAsync(options, line => Console.Error.WriteLine(line), cancellationToken);
            Console.WriteLine(CliJson.Serialize(result));
            return 0;
        });
        return command;
    }

    private static Command CreateSoak()
    {
        var json = new Option<bool>("--json") { Description = "Print one JSON object" };
        var minutes = new Option<double>("--minutes") { Description = "Length of the run", DefaultValueFactory = _ => new Fleet.Server.Benchmarking.SoakBenchmarkOptions().Minutes };
        var robots = new Option<int>("--robots") { Description = "Robots streamed in real time", DefaultValueFactory = _ => new Fleet.Server.Benchmarking.SoakBenchmarkOptions().Robots };
        var command = new Command("soak", "A long real-time run of a real server and clients on loopback with subscribers dropping: memory, acknowledgements sent against received, throughput.") { json, minutes, robots };
        command.SetAction(async (parse, cancellationToken) =>
        {
            var options = new Fleet.Server.Benchmarking.SoakBenchmarkOptions { Minutes = parse.GetValue(minutes), Robots = parse.GetValue(robots) };
            var result = await Fleet.Server.Benchmarking.SoakBenchmark.RunAsync(options, line => Console.Error.WriteLine(line), cancellationToken);
            Console.WriteLine(CliJson.Serialize(result));
            return result.LostAcknowledgements == 0 && result.ServerAnsweredAfterwards ? 0 : 1;
        });
        return command;
    }

    private static Command CreateFilter()
    {
        var json = new Option<bool>("--json") { Description = "Print one JSON object" };
        var rounds = new Option<int>("--rounds") { Description = "Alternating timing rounds (median reported)", DefaultValueFactory = _ => 7 };
        var command = new Command("filter", "One robust TDOA update in Fleet against a textbook EKF on MathNet dense matrices.") { json, rounds };
        command.SetAction(parse => FleetCommandLine.Guarded(() =>
        {
            var result = FilterBenchmarkRunner.Run(parse.GetValue(rounds));
            if (parse.GetValue(json))
            {
                Console.WriteLine(CliJson.Serialize(new Dictionary<string, object>
                {
                    ["ns_per_update"] = CliJson.Round(result.NsPerUpdate, 1),
                    ["ns_per_update_reference"] = CliJson.Round(result.NsPerUpdateReference, 1),
                    ["speedup"] = CliJson.Round(result.Speedup, 2),
                    ["bytes_per_update"] = CliJson.Round(result.BytesPerUpdate, 2),
                    ["bytes_per_update_reference"] = CliJson.Round(result.BytesPerUpdateReference, 1),
                    ["ns_per_bias_correction"] = CliJson.Round(result.NsPerBiasCorrection, 1),
                    ["bytes_per_bias_correction"] = CliJson.Round(result.BytesPerBiasCorrection, 2),
                    ["updates"] = result.Updates,
                    ["reference_updates"] = result.ReferenceUpdates,
                    ["rounds"] = result.Rounds,
                }));
            }
            else
            {
                Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
                    $"Fleet robust update     {result.NsPerUpdate,10:0.0} ns  {result.BytesPerUpdate,8:0.0} B/update"));
                Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
                    $"MathNet reference EKF   {result.NsPerUpdateReference,10:0.0} ns  {result.BytesPerUpdateReference,8:0.0} B/update"));
                Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
                    $"bias correction (3×30)  {result.NsPerBiasCorrection,10:0.0} ns  {result.BytesPerBiasCorrection,8:0.0} B/TDOA"));
                Console.WriteLine(string.Create(CultureInfo.InvariantCulture, $"speedup {result.Speedup:0.0}× (median of {result.Rounds} alternating rounds)"));
            }

            return 0;
        }));
        return command;
    }
}
