namespace Fleet.Cli;

/// <summary>A user-facing error: printed as "fleet: message" with exit code 2, no stack trace.</summary>
internal sealed class CliException(string message) : Exception(message);
