using System.CommandLine;
using Fleet.Server;

namespace Fleet.Cli.Commands;

/// <summary>
/// `fleet serve`: runs the server until Ctrl+C. Configuration comes from appsettings.json beside the binary,
/// environment variables (Fleet__Server__GrpcPort=50051, OTEL_*) and extra arguments (--Fleet:Server:GrpcPort=50051),
/// as documented in the README.
/// </summary>
internal static class ServeCommand
{
    public static Command Create()
    {
        var command = new Command("serve", "Run the Fleet server (gRPC ingest, pose streams, site admin, metrics). Extra --Section:Key=value arguments override configuration.")
        {
            TreatUnmatchedTokensAsErrors = false,
        };
        command.SetAction(async (parse, cancellationToken) =>
        {
            Console.WriteLine(SafetyNotice.Text);
            return await FleetServerHost.RunAsync([.. parse.UnmatchedTokens], cancellationToken: cancellationToken);
        });
        return command;
    }
}
