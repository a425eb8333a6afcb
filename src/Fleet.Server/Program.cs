// The Fleet server: gRPC ingest and pose streams over an embedded Orleans silo. Configuration: appsettings.json,
// environment variables (Fleet__Server__GrpcPort=…, OTEL_*) and command-line arguments (--Fleet:Server:GrpcPort=…).
try
{
    return await Fleet.Server.FleetServerHost.RunAsync(args);
}
catch (Fleet.Server.Security.InsecureConfigurationException e)
{
    // Secure by default: say why and how to proceed, without a stack trace.
    Console.Error.WriteLine($"fleet-server: {e.Message}");
    return 2;
}
