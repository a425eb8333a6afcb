using System.CommandLine;
using System.Diagnostics;
using System.Globalization;
using System.Text;
using Fleet.Contracts.V1;
using Fleet.Data;
using Fleet.Data.BiasModels;
using Fleet.Estimation.Bias.Training;
using Fleet.Estimation.Geometry;
using Fleet.Estimation.Measurements;
using Fleet.Server;
using Fleet.Server.Clients;
using Fleet.Server.LiveView;
using Fleet.Simulation;
using Google.Protobuf;
using Grpc.Core;
using Grpc.Net.Client;
using Microsoft.Extensions.Configuration;

namespace Fleet.Cli.Commands;

/// <summary>
/// `fleet demo`: the main job end to end on an embedded default. Starts the server in-process (single local silo,
/// SQLite in a temporary folder), trains a bias model on three invented layouts (or loads the cached one), registers
/// the demo site, drives a simulated fleet through the real gRPC ingest stream at a chosen speed-up, subscribes to the
/// site's pose stream, and shows a live table and the accuracy of the streamed poses against the simulator's truth.
/// </summary>
internal static class DemoCommand
{
    private const string SiteId = "harbor-point";

    public static Command Create()
    {
        var robots = new Option<int>("--robots") { Description = "Simulated robots on the demo site", DefaultValueFactory = _ => 24 };
        var duration = new Option<double>("--duration") { Description = "Simulated time (s)", DefaultValueFactory = _ => 60 };
        var speed = new Option<double>("--speed") { Description = "Simulated seconds per wall-clock second", DefaultValueFactory = _ => 4 };
        var layout = new Option<string>("--layout") { Description = "Anchor layout of the demo site", DefaultValueFactory = _ => WarehouseSites.Low };
        layout.AcceptOnlyFromAmong([.. WarehouseSites.Names]);
        var seed = new Option<int>("--seed") { Description = "Random seed", DefaultValueFactory = _ => 7 };
        var noBias = new Option<bool>("--no-bias-model") { Description = "Run without a learned bias model" };
        var data = new Option<DirectoryInfo>("--data") { Description = "Server data folder (default: a new temporary folder)" };
        var viewPort = new Option<int>("--view-port") { Description = "Port of the live floor view (0: a free port)", DefaultValueFactory = _ => 0 };
        var hold = new Option<bool>("--hold") { Description = "Keep the server and live view running after the run, until Ctrl+C" };
        var command = new Command("demo", "Run the Fleet server on an invented warehouse, drive a simulated fleet through gRPC, and show live poses and accuracy.")
        {
            robots, duration, speed, layout, seed, noBias, data, viewPort, hold,
        };
        command.SetAction((parse, cancellationToken) => RunAsync(
            parse.GetValue(robots), parse.GetValue(duration), parse.GetValue(speed), parse.GetValue(layout)!, parse.GetValue(seed),
            !parse.GetValue(noBias), parse.GetValue(data)?.FullName, parse.GetValue(viewPort), parse.GetValue(hold), cancellationToken));
        return command;
    }

    private static async Task<int> RunAsync(int robotCount, double duration, double speed, string layoutName, int seed, bool useBias, string? dataDirectory, int viewPort, bool hold, CancellationToken cancellationToken)
    {
        if (robotCount < 1 || duration <= 0 || speed <= 0)
        {
            Console.Error.WriteLine("fleet: --robots, --duration and --speed must be positive");
            return 2;
        }

        if (viewPort is < 0 or > 65535)
        {
            Console.Error.WriteLine("fleet: --view-port must be 0 (a free port) or 1–65535");
            return 2;
        }

        var dataDir = dataDirectory ?? Path.Combine(Path.GetTempPath(), "fleet-demo-" + Environment.ProcessId.ToString(CultureInfo.InvariantCulture));
        Directory.CreateDirectory(dataDir);
        var simulation = new SimulationOptions { Layout = layoutName, RobotCount = robotCount, DurationSeconds = duration, Seed = seed };
        var generator = new MeasurementGenerator(simulation);

        // The live view shows racks and the floor from a site file; the server only stores anchors.
        var siteFile = Path.Combine(dataDir, $"demo-site-{layoutName}.json");
        SiteFile.Write(siteFile, generator.Layout);
        await using var app = await FleetServerHost.StartAsync([], builder => builder.Configuration.AddInMemoryCollection(new Dictionary<string, string?>
        {
            ["Fleet:Server:GrpcPort"] = "0",
            ["Fleet:Server:MetricsPort"] = "0",
            ["Fleet:Server:SiloPort"] = "0",
            ["Fleet:Server:GatewayPort"] = "0",
            ["Fleet:Server:DataDirectory"] = dataDir,
            ["Fleet:LiveView:Port"] = viewPort.ToString(CultureInfo.InvariantCulture),
            [$"Fleet:LiveView:SiteFiles:{SiteId}"] = siteFile,
            // Demo mode: loopback only, so it may run without credentials.
            ["Fleet:Server:ListenAddress"] = "localhost",
            ["Fleet:Security:AllowAnonymous"] = "true",
            ["Logging:LogLevel:Default"] = "Warning",
        }), cancellationToken: cancellationToken);
        var address = FleetServerHost.GetGrpcAddress(app);
        var options = FleetServerHost.GetOptions(app);
        Console.WriteLine($"server: gRPC {address}  metrics http://127.0.0.1:{options.MetricsPort}/metrics  data {dataDir}");
        Console.WriteLine($"live floor view: {LiveViewEndpoints.GetAddress(app, SiteId)}");

        using var channel = GrpcChannel.ForAddress(address);
        var sites = new SiteService.SiteServiceClient(channel);
        await SiteSetup.ApplyAsync(sites, SiteId, generator.Layout.Anchors, generator.Robots, "Harbor Point DC (invented)", cancellationToken);
        Console.WriteLine($"site {SiteId}: layout {layoutName}, {generator.Layout.Anchors.Count} anchors, {robotCount} robots");
        foreach (var warning in generator.Layout.Anchors.Warnings)
        {
            Console.WriteLine($"  site warning: {warning.Message}");
        }

        if (useBias)
        {
            var model = LoadOrTrainModel(dataDir, layoutName);
            await sites.UploadBiasModelAsync(new UploadBiasModelRequest
            {
                SiteId = SiteId,
                Model = ByteString.CopyFrom(model),
                Description = "trained by fleet demo on the other Harbor Point layouts",
                Activate = true,
            }, deadline: DateTime.UtcNow.AddSeconds(30), cancellationToken: cancellationToken);
            Console.WriteLine("bias model uploaded and activated");
        }

        var board = new DemoBoard { Header = $"live floor view: {LiveViewEndpoints.GetAddress(app, SiteId)}" };
        using var watchCancel = CancellationTokenSource.CreateLinkedTokenSource(cancellationToken);
        var watchTask = WatchAsync(new PoseService.PoseServiceClient(channel), board, watchCancel.Token);
        var ingest = await DriveAsync(new IngestService.IngestServiceClient(channel), generator, speed, board, cancellationToken);

        // Let the last poses arrive, then stop watching.
        await Task.Delay(500, cancellationToken);
        await watchCancel.CancelAsync();
        await watchTask;

        board.Draw(final: true);
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"ingest: {ingest.Sent} measurements in {ingest.Batches} batches; acknowledged {ingest.Accepted} accepted, {ingest.DownWeighted} down-weighted, {ingest.Buffered} buffered, {ingest.Rejected} rejected"));
        if (hold && !cancellationToken.IsCancellationRequested)
        {
            Console.WriteLine($"run finished; the server and the live view ({LiveViewEndpoints.GetAddress(app, SiteId)}) keep running until Ctrl+C");
            try
            {
                await Task.Delay(Timeout.Infinite, cancellationToken);
            }
            catch (OperationCanceledException)
            {
                // Ctrl+C.
            }
        }

        await app.StopAsync(CancellationToken.None);
        Console.WriteLine("Next: `fleet serve` runs the server on its own; `fleet watch --site ID` prints a running server's poses.");
        return 0;
    }

    /// <summary>A cached model for this layout in the data folder, or a new one trained on the other layouts (held out: the demo layout).</summary>
    private static byte[] LoadOrTrainModel(string dataDir, string demoLayout)
    {
        var path = Path.Combine(dataDir, $"demo-bias-{demoLayout}.fbm");
        if (File.Exists(path))
        {
            Console.WriteLine($"bias model: loaded {path}");
            return File.ReadAllBytes(path);
        }

        var clock = Stopwatch.StartNew();
        var samples = new List<TdoaTrainingSample>();
        var layouts = WarehouseSites.Names.Where(n => n != demoLayout).ToArray();
        foreach (var (name, i) in layouts.Select((n, i) => (n, i)))
        {
            var generator = new MeasurementGenerator(new SimulationOptions { Layout = name, RobotCount = 4, DurationSeconds = 60, Seed = 100 + i });
            var extraction = TrainingSampleExtractor.Extract(generator.Layout, generator.Generate(), group: name);
            samples.AddRange(LineOfSightScreen.Keep(generator.Layout, extraction.Samples));
        }

        var result = BiasTrainer.Train(samples, new BiasTrainerOptions { MaxEpochs = 40 });
        BiasModelFile.Write(path, result.Model, BiasModelMetadata.FromReport(result.Report, DateTimeOffset.UtcNow, "fleet demo"));
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"bias model: trained on {string.Join(", ", layouts)} ({samples.Count} samples) in {clock.Elapsed.TotalSeconds:0.0} s; held-out TDOA error {result.Report.ValidationRobustRmseBefore:0.000} → {result.Report.ValidationRobustRmseAfter:0.000} m"));
        return File.ReadAllBytes(path);
    }

    private sealed record IngestTotals(long Sent, long Batches, long Accepted, long DownWeighted, long Buffered, long Rejected);

    /// <summary>Streams the simulated fleet's TDOA and odometry in 50 ms batches at <paramref name="speed"/>× real time; truth goes to the board only.</summary>
    private static async Task<IngestTotals> DriveAsync(IngestService.IngestServiceClient client, MeasurementGenerator generator, double speed, DemoBoard board, CancellationToken cancellationToken)
    {
        const double batchSeconds = 0.05;
        long accepted = 0, downWeighted = 0, buffered = 0, rejected = 0;

        // Acks arrive on the stream's reader task; the totals are read only after FlushAsync.
        await using var stream = new ReconnectingIngestStream(client, onAck: ack =>
        {
            Interlocked.Add(ref accepted, ack.Accepted);
            Interlocked.Add(ref downWeighted, ack.DownWeighted);
            Interlocked.Add(ref buffered, ack.Buffered);
            Interlocked.Add(ref rejected, ack.Rejected);
        });

        var batcher = new MeasurementBatcher(SiteId);
        var clock = Stopwatch.StartNew();
        double nextFlush = batchSeconds;
        long sent = 0, batches = 0;
        var lastDraw = 0L;
        foreach (var record in generator.Generate())
        {
            var time = record switch { TdoaRecord t => t.Time, OdometryRecord o => o.Time, TruthRecord t => t.Time, _ => 0.0 };
            while (time >= nextFlush)
            {
                if (batcher.Count > 0)
                {
                    sent += batcher.Count;
                    await stream.SendAsync(batcher.TakeBatch((ulong)++batches), cancellationToken);
                }

                var wait = TimeSpan.FromSeconds(nextFlush / speed) - clock.Elapsed;
                if (wait > TimeSpan.Zero)
                {
                    await Task.Delay(wait, cancellationToken);
                }

                nextFlush += batchSeconds;
                if (clock.ElapsedMilliseconds - lastDraw > 500)
                {
                    lastDraw = clock.ElapsedMilliseconds;
                    board.Draw(final: false, simulatedTime: time);
                }
            }

            if (record is TruthRecord truth)
            {
                board.AddTruth(truth);
            }
            else
            {
                batcher.Add(record);
            }
        }

        if (batcher.Count > 0)
        {
            sent += batcher.Count;
            await stream.SendAsync(batcher.TakeBatch((ulong)++batches), cancellationToken);
        }

        await stream.FlushAsync(cancellationToken);
        return new IngestTotals(sent, batches, accepted, downWeighted, buffered, rejected);
    }

    private static async Task WatchAsync(PoseService.PoseServiceClient client, DemoBoard board, CancellationToken cancellationToken)
    {
        try
        {
            using var call = client.WatchPoses(new WatchPosesRequest { SiteId = SiteId, MaxRatePerRobotHz = 10 }, cancellationToken: cancellationToken);
            await foreach (var message in call.ResponseStream.ReadAllAsync(cancellationToken))
            {
                foreach (var pose in message.Poses)
                {
                    board.AddPose(pose);
                }
            }
        }
        catch (RpcException e) when (e.StatusCode == StatusCode.Cancelled)
        {
        }
        catch (OperationCanceledException)
        {
        }
    }

    /// <summary>Latest pose and truth per robot, and the running error of streamed poses against interpolated truth.</summary>
    private sealed class DemoBoard
    {
        private readonly Lock _gate = new();
        private readonly SortedDictionary<string, RobotRow> _rows = new(StringComparer.Ordinal);
        private readonly bool _interactive = !Console.IsOutputRedirected;
        private double _sumSquaredHorizontal;
        private long _scored;
        private long _poses;
        private double _lastPrinted = double.NegativeInfinity;

        /// <summary>A line repeated above every redraw (the live view's address), so it never scrolls away.</summary>
        public string? Header { get; init; }

        public void AddTruth(TruthRecord truth)
        {
            lock (_gate)
            {
                var row = Row(truth.Robot);
                row.Truth.Enqueue(truth);
                while (row.Truth.Count > 100)
                {
                    row.Truth.Dequeue();
                }

                // Poses newer than the truth seen so far wait here until a later truth sample brackets them.
                while (row.Pending.Count > 0 && row.Pending.Peek().Time <= truth.Time)
                {
                    var (time, position) = row.Pending.Dequeue();
                    Score(row, time, position);
                }
            }
        }

        public void AddPose(Pose pose)
        {
            lock (_gate)
            {
                _poses++;
                var row = Row(pose.RobotId);
                row.Pose = pose;
                var t = (pose.ValidTime.ToDateTimeOffset() - DateTimeOffset.UnixEpoch).TotalSeconds;
                if (pose.TrackingState is TrackingState.Locked or TrackingState.Uncertain)
                {
                    var position = new Vector3D(pose.TagPosition.X, pose.TagPosition.Y, pose.TagPosition.Z);
                    if (!Score(row, t, position) && row.Pending.Count < 64)
                    {
                        row.Pending.Enqueue((t, position));
                    }
                }
            }
        }

        private bool Score(RobotRow row, double time, Vector3D position)
        {
            if (TruthAt(row, time) is not { } truth)
            {
                return false;
            }

            var e = (position - truth).HorizontalLength;
            row.LastError = e;
            row.SumSquared += e * e;
            row.Scored++;
            _sumSquaredHorizontal += e * e;
            _scored++;
            return true;
        }

        public void Draw(bool final, double simulatedTime = double.NaN)
        {
            lock (_gate)
            {
                if (!final && !_interactive)
                {
                    // Redirected output: a table every 10 simulated seconds instead of a live redraw.
                    if (simulatedTime - _lastPrinted < 10)
                    {
                        return;
                    }

                    _lastPrinted = simulatedTime;
                }

                var sb = new StringBuilder();
                if (_interactive && !final)
                {
                    sb.Append("\u001b[H\u001b[2J");
                }

                if (Header is not null && _interactive && !final)
                {
                    sb.AppendLine(Header);
                }

                if (!double.IsNaN(simulatedTime))
                {
                    sb.AppendLine(string.Create(CultureInfo.InvariantCulture, $"simulated time {simulatedTime:0.0} s"));
                }

                var table = new Output.TextTable("robot", "state", "x m", "y m", "1-σ m", "rejected", "error m", "rms error m");
                foreach (var (id, row) in _rows)
                {
                    var p = row.Pose;
                    table.AddRow(id, p is null ? "–" : WatchCommand.StateName(p.TrackingState),
                        p?.TagPosition.X ?? double.NaN, p?.TagPosition.Y ?? double.NaN, p is null ? double.NaN : WatchCommand.HorizontalSigma(p),
                        p is null ? "–" : (p.RecentRejectionRatio * 100).ToString("0.0", CultureInfo.InvariantCulture) + "%",
                        row.LastError, row.Scored == 0 ? double.NaN : Math.Sqrt(row.SumSquared / row.Scored));
                }

                sb.Append(table);
                sb.AppendLine(Summary());
                Console.Write(sb.ToString());
            }
        }

        public string Summary()
        {
            lock (_gate)
            {
                var locked = _rows.Values.Count(r => r.Pose?.TrackingState == TrackingState.Locked);
                var rms = _scored == 0 ? double.NaN : Math.Sqrt(_sumSquaredHorizontal / _scored);
                return string.Create(CultureInfo.InvariantCulture,
                    $"{_poses} pose updates streamed; {locked}/{_rows.Count} robots locked; horizontal RMSE of streamed poses against truth {rms:0.000} m over {_scored} updates");
            }
        }

        private RobotRow Row(string id)
        {
            if (!_rows.TryGetValue(id, out var row))
            {
                _rows[id] = row = new RobotRow();
            }

            return row;
        }

        private static Vector3D? TruthAt(RobotRow row, double t)
        {
            TruthRecord? before = null;
            foreach (var truth in row.Truth)
            {
                if (truth.Time <= t)
                {
                    before = truth;
                    continue;
                }

                if (before is null || truth.Time - before.Time > 0.5)
                {
                    return null;
                }

                var f = (t - before.Time) / (truth.Time - before.Time);
                return before.TagPosition + (f * (truth.TagPosition - before.TagPosition));
            }

            return null;
        }

        private sealed class RobotRow
        {
            public Queue<TruthRecord> Truth { get; } = new();
            public Queue<(double Time, Vector3D Position)> Pending { get; } = new();
            public Pose? Pose { get; set; }
            public double LastError { get; set; } = double.NaN;
            public double SumSquared { get; set; }
            public long Scored { get; set; }
        }
    }
}
