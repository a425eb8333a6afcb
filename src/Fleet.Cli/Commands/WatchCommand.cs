using System.CommandLine;
using System.Globalization;
using Fleet.Contracts.V1;
using Fleet.Server.Clients;
using Grpc.Core;

namespace Fleet.Cli.Commands;

/// <summary>`fleet watch`: subscribes to a running server's pose stream and prints one line per pose update.</summary>
internal static class WatchCommand
{
    public static Command Create()
    {
        var server = ServerOption();
        var site = new Option<string>("--site") { Description = "Site id", Required = true };
        var robots = new Option<string[]>("--robot") { Description = "Only these robots (repeatable)" };
        var rate = new Option<double>("--rate") { Description = "At most this many updates per robot per second (0: all)", DefaultValueFactory = _ => 2 };
        var count = new Option<int>("--count") { Description = "Stop after this many updates (0: until Ctrl+C)" };
        var (apiKey, caFile) = ConnectionOptions();
        var command = new Command("watch", "Subscribe to a running server and print pose updates.") { server, site, robots, rate, count, apiKey, caFile };
        command.SetAction(async (parse, cancellationToken) =>
        {
            using var connection = Connect(parse, server, apiKey, caFile);
            var client = new PoseService.PoseServiceClient(connection.CallInvoker);
            var request = new WatchPosesRequest { SiteId = parse.GetValue(site)!, MaxRatePerRobotHz = parse.GetValue(rate) };
            request.RobotIds.AddRange(parse.GetValue(robots) ?? []);
            var limit = parse.GetValue(count);
            var printed = 0;
            try
            {
                using var call = client.WatchPoses(request, cancellationToken: cancellationToken);
                await foreach (var message in call.ResponseStream.ReadAllAsync(cancellationToken))
                {
                    foreach (var pose in message.Poses)
                    {
                        Console.WriteLine(Format(pose));
                        if (limit > 0 && ++printed >= limit)
                        {
                            return 0;
                        }
                    }
                }
            }
            catch (RpcException e) when (e.StatusCode != StatusCode.Cancelled)
            {
                Console.Error.WriteLine($"fleet: {e.Status.Detail} ({e.StatusCode})");
                return 2;
            }
            catch (OperationCanceledException)
            {
            }

            return 0;
        });
        return command;
    }

    /// <summary>--server: an absolute http:// or https:// address (System.CommandLine has no built-in Uri parser).</summary>
    public static Option<Uri> ServerOption() => new("--server")
    {
        Description = "Server gRPC address (https:// when the server has TLS)",
        DefaultValueFactory = _ => new Uri("http://127.0.0.1:50051"),
        CustomParser = result =>
        {
            var text = result.Tokens.Count == 1 ? result.Tokens[0].Value : string.Empty;
            if (Uri.TryCreate(text, UriKind.Absolute, out var uri) && (uri.Scheme == Uri.UriSchemeHttp || uri.Scheme == Uri.UriSchemeHttps))
            {
                return uri;
            }

            result.AddError($"--server: '{text}' is not an http:// or https:// address");
            return null;
        },
    };

    /// <summary>--api-key (default: the FLEET_API_KEY variable) and --ca-file, shared by commands that call a server.</summary>
    public static (Option<string?> ApiKey, Option<string?> CaFile) ConnectionOptions() => (
        new Option<string?>("--api-key") { Description = $"API key sent as x-api-key (default: ${FleetClientConnection.ApiKeyVariable})" },
        new Option<string?>("--ca-file") { Description = "PEM CA certificate to trust for an https server (default: the system roots)" });

    public static FleetClientConnection Connect(ParseResult parse, Option<Uri> server, Option<string?> apiKey, Option<string?> caFile) => new(
        parse.GetValue(server)!,
        parse.GetValue(apiKey) ?? Environment.GetEnvironmentVariable(FleetClientConnection.ApiKeyVariable),
        parse.GetValue(caFile));

    /// <summary>One pose as a line: time, robot, state, tag position, 1-σ horizontal, yaw, rejection ratio.</summary>
    public static string Format(Pose pose) => string.Create(CultureInfo.InvariantCulture,
        $"{pose.ValidTime.ToDateTimeOffset():HH:mm:ss.fff} {pose.RobotId,-10} {StateName(pose.TrackingState),-9} "
        + $"x {pose.TagPosition.X,8:0.000} y {pose.TagPosition.Y,8:0.000} z {pose.TagPosition.Z,6:0.000} m  "
        + $"1σ {HorizontalSigma(pose),6:0.000} m  yaw {pose.Yaw * 180 / Math.PI,7:0.0}°  rej {pose.RecentRejectionRatio * 100,5:0.0}%");

    public static string StateName(TrackingState state) => state switch
    {
        TrackingState.Acquiring => "acquiring",
        TrackingState.Locked => "locked",
        TrackingState.Uncertain => "uncertain",
        TrackingState.Lost => "lost",
        _ => "?",
    };

    /// <summary>Largest horizontal 1-σ of a pose (m); NaN when the pose carries no covariance.</summary>
    public static double HorizontalSigma(Pose pose)
    {
        var c = pose.Covariance;
        var n = (int)Math.Round(Math.Sqrt(c.Count));
        return n < 2 || n * n != c.Count ? double.NaN : Estimation.Filtering.CovarianceMeasures.HorizontalSigma([.. c], n);
    }
}
