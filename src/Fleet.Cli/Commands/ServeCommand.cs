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
        var insecure = new Option<bool>("--insecure-no-auth")
        {
            Description = "Serve callers without credentials, with full access (Fleet:Security:AllowAnonymous=true). Only on a trusted network.",
        };
        var command = new Command("serve", "Run the Fleet server (gRPC ingest, pose streams, site admin, metrics). Extra --Section:Key=value arguments override configuration.")
        {
            TreatUnmatchedTokensAsErrors = false,
        };
        command.Options.Add(insecure);
        command.SetAction(async (parse, cancellationToken) =>
        {
            string[] args = parse.GetValue(insecure)
                ? [.. parse.UnmatchedTokens, "--Fleet:Security:AllowAnonymous=true"]
                : [.. parse.UnmatchedTokens];
            try
            {
                return await FleetServerHost.RunAsync(args, cancellationToken: cancellationToken);
            }
            catch (Server.Security.InsecureConfigurationException e)
            {
                // Secure by default: no credentials configured and nobody said anonymous access is intended.
                Console.Error.WriteLine($"fleet: {e.Message}");
                return 2;
            }
        });
        return command;
    }
}
