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
        bench.Subcommands.Add(CreateCluster());
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

    private static Command CreateCluster()
    {
        var defaults = new Fleet.Server.Benchmarking.ClusterBenchmarkOptions();
        var json = new Option<bool>("--json") { Description = "Print one JSON object" };
        var servers = UriListOption("--server", "gRPC address of a running silo; repeat once per silo of the cluster");
        var metrics = UriListOption("--metrics", "Prometheus endpoint of each --server, in the same order (http://127.0.0.1:9464/metrics)");
        var robots = new Option<int>("--robots") { Description = "Simulated robots", DefaultValueFactory = _ => defaults.Robots };
        var seconds = new Option<double>("--seconds") { Description = "Seconds of samples sent in real time (paced phase)", DefaultValueFactory = _ => defaults.PacedSeconds };
        var saturatedSeconds = new Option<double>("--saturated-seconds") { Description = "Simulated seconds sent as fast as the cluster acknowledges", DefaultValueFactory = _ => defaults.SaturatedSeconds };
        var (apiKey, caFile) = WatchCommand.ConnectionOptions();
        var command = new Command("cluster", "Drive running silos of one cluster with a simulated fleet spread over all of them: lost samples, throughput, and per-silo robots, heap, CPU (scraped from each silo's metrics).")
        {
            servers, metrics, robots, seconds, saturatedSeconds, json, apiKey, caFile,
        };
        command.SetAction(async (parse, cancellationToken) =>
        {
            var serverList = parse.GetValue(servers) ?? [];
            var metricsList = parse.GetValue(metrics) ?? [];
            if (serverList.Length != metricsList.Length)
            {
                Console.Error.WriteLine($"fleet: give one --metrics per --server, in the same order ({serverList.Length} --server, {metricsList.Length} --metrics)");
                return 2;
            }

            var options = defaults with
            {
                Servers = serverList,
                Metrics = metricsList,
                Robots = parse.GetValue(robots),
                PacedSeconds = parse.GetValue(seconds),
                SaturatedSeconds = parse.GetValue(saturatedSeconds),
                ApiKey = parse.GetValue(apiKey) ?? Environment.GetEnvironmentVariable(Fleet.Server.Clients.FleetClientConnection.ApiKeyVariable),
                CaFile = parse.GetValue(caFile),
            };
            Fleet.Server.Benchmarking.ClusterBenchmarkResult result;
            try
            {
                result = await Fleet.Server.Benchmarking.ClusterBenchmark.RunAsync(options, line => Console.Error.WriteLine(line), cancellationToken);
            }
            catch (Exception e) when (e is HttpRequestException or Grpc.Core.RpcException)
            {
                // Unreachable servers or metrics endpoints before any load: say which, without a stack trace.
                Console.Error.WriteLine($"fleet: {e.Message}");
                return 2;
            }

            if (parse.GetValue(json))
            {
                Console.WriteLine(CliJson.Serialize(result));
            }
            else
            {
                PrintCluster(result);
            }

            return result.Lost == 0 && result.Errors.Length == 0 ? 0 : 1;
        });
        return command;
    }

    private static void PrintCluster(Fleet.Server.Benchmarking.ClusterBenchmarkResult r)
    {
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"{r.Silos} silos, {r.Robots} robots, {r.Streams} gateway streams ({r.Cores} cores on this machine)"));
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"samples sent {r.Sent:N0}, acknowledged {r.Acknowledged:N0}, lost {r.Lost:N0} ({r.RejectedFraction * 100:0.0} % rejected by the filters)"));
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"paced      {r.PacedMeasurementsPerSecond,10:N0} samples/s ({r.PacedOfferedMeasurementsPerSecond:N0}/s offered; took {r.PacedWallSeconds:0.0} s, batches at most {r.PacedMaxLagMs:N0} ms late)"));
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"saturated  {r.SaturatedMeasurementsPerSecond,10:N0} samples/s, {r.SiloCpuMicrosecondsPerMeasurement:0.0} µs of silo CPU per sample (client: {r.ClientCpuSeconds:0.0} CPU-s)"));
        var table = new TextTable("silo", "robots", "heap B/robot", "working set MB", "CPU s (saturated)", "samples/CPU-s");
        foreach (var silo in r.PerSilo)
        {
            table.AddRow(silo.Server, silo.RobotsActive, Cell(silo.HeapBytesPerRobot, "N0"), Cell(silo.WorkingSetBytes / 1e6, "0.0"), Cell(silo.CpuSeconds, "0.00"), Cell(silo.MeasurementsPerCpuSecond, "N0"));
        }

        Console.Write(table.ToString());
        foreach (var error in r.Errors)
        {
            Console.WriteLine($"error: {error}");
        }
    }

    private static string Cell(double value, string format) => double.IsFinite(value) ? value.ToString(format, CultureInfo.InvariantCulture) : "–";

    /// <summary>A repeatable option of absolute http:// or https:// addresses.</summary>
    private static Option<Uri[]> UriListOption(string name, string description) => new(name)
    {
        Description = description,
        Required = true,
        CustomParser = result =>
        {
            var uris = new List<Uri>();
            foreach (var token in result.Tokens)
            {
                if (Uri.TryCreate(token.Value, UriKind.Absolute, out var uri) && (uri.Scheme == Uri.UriSchemeHttp || uri.Scheme == Uri.UriSchemeHttps))
                {
                    uris.Add(uri);
                }
                else
                {
                    result.AddError($"{name}: '{token.Value}' is not an http:// or https:// address");
                }
            }

            return [.. uris];
        },
    };

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
