using System.CommandLine;
using System.Globalization;
using Fleet.Contracts.V1;
using Grpc.Core;
using Grpc.Net.Client;

namespace Fleet.Cli.Commands;

/// <summary>`fleet watch`: subscribes to a running server's pose stream and prints one line per pose update.</summary>
internal static class WatchCommand
{
    public static Command Create()
    {
        var server = new Option<Uri>("--server") { Description = "Server gRPC address", DefaultValueFactory = _ => new Uri("http://127.0.0.1:50051") };
        var site = new Option<string>("--site") { Description = "Site id", Required = true };
        var robots = new Option<string[]>("--robot") { Description = "Only these robots (repeatable)" };
        var rate = new Option<double>("--rate") { Description = "At most this many updates per robot per second (0: all)", DefaultValueFactory = _ => 2 };
        var count = new Option<int>("--count") { Description = "Stop after this many updates (0: until Ctrl+C)" };
        var command = new Command("watch", "Subscribe to a running server and print pose updates.") { server, site, robots, rate, count };
        command.SetAction(async (parse, cancellationToken) =>
        {
            using var channel = GrpcChannel.ForAddress(parse.GetValue(server)!);
            var client = new PoseService.PoseServiceClient(channel);
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
