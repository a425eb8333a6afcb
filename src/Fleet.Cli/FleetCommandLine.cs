using System.CommandLine;

namespace Fleet.Cli;

/// <summary>Builds the root `fleet` command. Each subcommand lives in its own file under Commands/.</summary>
internal static class FleetCommandLine
{
    public static int Run(string[] args) => BuildRootCommand().Parse(args).Invoke();

    public static RootCommand BuildRootCommand()
    {
        var root = new RootCommand("Fleet: central UWB TDOA localization for fleets of warehouse robots.");
        return root;
    }
}
