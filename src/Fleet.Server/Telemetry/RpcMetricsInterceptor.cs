using System.Diagnostics;
using Fleet.Grains.Telemetry;
using Grpc.Core;
using Grpc.Core.Interceptors;

namespace Fleet.Server.Telemetry;

/// <summary>
/// Records <c>rpc.server.call.duration</c> (s) per the OpenTelemetry RPC semantic conventions, which grpc-dotnet does
/// not emit itself: <c>rpc.system.name</c> = grpc, <c>rpc.method</c> = "package.Service/Method",
/// <c>rpc.status_code</c> = the canonical code name, and <c>error.type</c> on failure. Streams are timed until they end.
/// </summary>
internal sealed class RpcMetricsInterceptor(FleetInstruments instruments) : Interceptor
{
    public override async Task<TResponse> UnaryServerHandler<TRequest, TResponse>(
        TRequest request, ServerCallContext context, UnaryServerMethod<TRequest, TResponse> continuation)
    {
        var start = Stopwatch.GetTimestamp();
        try
        {
            var response = await continuation(request, context);
            Record(context, start, StatusCode.OK, null);
            return response;
        }
        catch (Exception e)
        {
            Record(context, start, e);
            throw;
        }
    }

    public override async Task<TResponse> ClientStreamingServerHandler<TRequest, TResponse>(
        IAsyncStreamReader<TRequest> requestStream, ServerCallContext context, ClientStreamingServerMethod<TRequest, TResponse> continuation)
    {
        var start = Stopwatch.GetTimestamp();
        try
        {
            var response = await continuation(requestStream, context);
            Record(context, start, StatusCode.OK, null);
            return response;
        }
        catch (Exception e)
        {
            Record(context, start, e);
            throw;
        }
    }

    public override async Task ServerStreamingServerHandler<TRequest, TResponse>(
        TRequest request, IServerStreamWriter<TResponse> responseStream, ServerCallContext context, ServerStreamingServerMethod<TRequest, TResponse> continuation)
    {
        var start = Stopwatch.GetTimestamp();
        try
        {
            await continuation(request, responseStream, context);
            Record(context, start, StatusCode.OK, null);
        }
        catch (Exception e)
        {
            Record(context, start, e);
            throw;
        }
    }

    public override async Task DuplexStreamingServerHandler<TRequest, TResponse>(
        IAsyncStreamReader<TRequest> requestStream, IServerStreamWriter<TResponse> responseStream, ServerCallContext context,
        DuplexStreamingServerMethod<TRequest, TResponse> continuation)
    {
        var start = Stopwatch.GetTimestamp();
        try
        {
            await continuation(requestStream, responseStream, context);
            Record(context, start, StatusCode.OK, null);
        }
        catch (Exception e)
        {
            Record(context, start, e);
            throw;
        }
    }

    private void Record(ServerCallContext context, long start, Exception e)
    {
        var code = e switch
        {
            RpcException rpc => rpc.StatusCode,
            OperationCanceledException when context.CancellationToken.IsCancellationRequested => StatusCode.Cancelled,
            _ => StatusCode.Unknown,
        };
        Record(context, start, code, e is RpcException ? null : e.GetType().FullName);
    }

    private void Record(ServerCallContext context, long start, StatusCode code, string? exceptionType)
    {
        var name = StatusName(code);
        var tags = new TagList
        {
            { FleetInstrumentNames.RpcSystemName, "grpc" },
            { FleetInstrumentNames.RpcMethod, MethodName(context.Method) },
            { FleetInstrumentNames.RpcStatusCode, name },
        };
        if (code != StatusCode.OK)
        {
            tags.Add(FleetInstrumentNames.ErrorType, exceptionType ?? name);
        }

        instruments.RpcServerCallDuration.Record(Stopwatch.GetElapsedTime(start).TotalSeconds, tags);
    }

    /// <summary>"/fleet.v1.PoseService/GetPose" → "fleet.v1.PoseService/GetPose".</summary>
    private static string MethodName(string method) => method.Length > 1 && method[0] == '/' ? method[1..] : method;

    private static string StatusName(StatusCode code) => code switch
    {
        StatusCode.OK => "OK",
        StatusCode.Cancelled => "CANCELLED",
        StatusCode.Unknown => "UNKNOWN",
        StatusCode.InvalidArgument => "INVALID_ARGUMENT",
        StatusCode.DeadlineExceeded => "DEADLINE_EXCEEDED",
        StatusCode.NotFound => "NOT_FOUND",
        StatusCode.AlreadyExists => "ALREADY_EXISTS",
        StatusCode.PermissionDenied => "PERMISSION_DENIED",
        StatusCode.ResourceExhausted => "RESOURCE_EXHAUSTED",
        StatusCode.FailedPrecondition => "FAILED_PRECONDITION",
        StatusCode.Aborted => "ABORTED",
        StatusCode.OutOfRange => "OUT_OF_RANGE",
        StatusCode.Unimplemented => "UNIMPLEMENTED",
        StatusCode.Internal => "INTERNAL",
        StatusCode.Unavailable => "UNAVAILABLE",
        StatusCode.DataLoss => "DATA_LOSS",
        StatusCode.Unauthenticated => "UNAUTHENTICATED",
        _ => "UNKNOWN",
    };
}
