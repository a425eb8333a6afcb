using System.CommandLine;
using Fleet.Cli.Commands;
using Fleet.Estimation.Anchors;

namespace Fleet.Cli;

/// <summary>Builds the root `fleet` command. Each subcommand lives in its own file under Commands/.</summary>
internal static class FleetCommandLine
{
    public static int Run(string[] args) => BuildRootCommand().Parse(args).Invoke();

    public static RootCommand BuildRootCommand()
    {
        var root = new RootCommand("Fleet: central UWB TDOA localization for fleets of warehouse robots.");
        root.Subcommands.Add(DemoCommand.Create());
        root.Subcommands.Add(ServeCommand.Create());
        root.Subcommands.Add(WatchCommand.Create());
        root.Subcommands.Add(SimulateCommand.Create());
        root.Subcommands.Add(ReplayCommand.Create());
        root.Subcommands.Add(BiasCommand.Create());
        root.Subcommands.Add(BenchCommand.Create());
        root.Subcommands.Add(SiteCommand.Create());
        root.Subcommands.Add(AuditCommand.Create());
        return root;
    }

    /// <summary>
    /// Runs a command body and turns expected failures (bad files, bad arguments) into one clear line on stderr
    /// and exit code 2; anything else is a bug and keeps its stack trace.
    /// </summary>
    public static int Guarded(Func<int> body)
    {
        try
        {
            return body();
        }
        catch (Exception e) when (e is CliException or Data.FleetDataException or AnchorMapException or FileNotFoundException or DirectoryNotFoundException)
        {
            Console.Error.WriteLine($"fleet: {e.Message}");
            return 2;
        }
    }
}
