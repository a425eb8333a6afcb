// The Fleet server: gRPC ingest and pose streams over an embedded Orleans silo. Configuration: appsettings.json,
// environment variables (Fleet__Server__GrpcPort=…, OTEL_*) and command-line arguments (--Fleet:Server:GrpcPort=…).
return await Fleet.Server.FleetServerHost.RunAsync(args);
