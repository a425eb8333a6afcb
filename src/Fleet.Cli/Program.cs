return Fleet.Cli.FleetCommandLine.Run(args);
