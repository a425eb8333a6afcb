using Grpc.Core;
using Grpc.Core.Interceptors;
using Orleans.Runtime;

namespace Fleet.Server.Cluster;

/// <summary>
/// Turns the grain-call failures of a silo that has just been lost (until membership declares it dead and its grains
/// reactivate elsewhere) into gRPC UNAVAILABLE, the status clients retry on, instead of UNKNOWN.
/// </summary>
internal sealed class SiloLossInterceptor : Interceptor
{
    public override async Task<TResponse> UnaryServerHandler<TRequest, TResponse>(TRequest request, ServerCallContext context, UnaryServerMethod<TRequest, TResponse> continuation)
    {
        try
        {
            return await continuation(request, context);
        }
        catch (Exception e) when (IsSiloLoss(e))
        {
            throw Unavailable(e);
        }
    }

    public override async Task ServerStreamingServerHandler<TRequest, TResponse>(TRequest request, IServerStreamWriter<TResponse> responseStream, ServerCallContext context, ServerStreamingServerMethod<TRequest, TResponse> continuation)
    {
        try
        {
            await continuation(request, responseStream, context);
        }
        catch (Exception e) when (IsSiloLoss(e))
        {
            throw Unavailable(e);
        }
    }

    public override async Task DuplexStreamingServerHandler<TRequest, TResponse>(IAsyncStreamReader<TRequest> requestStream, IServerStreamWriter<TResponse> responseStream, ServerCallContext context, DuplexStreamingServerMethod<TRequest, TResponse> continuation)
    {
        try
        {
            await continuation(requestStream, responseStream, context);
        }
        catch (Exception e) when (IsSiloLoss(e))
        {
            throw Unavailable(e);
        }
    }

    internal static bool IsSiloLoss(Exception e) =>
        e is SiloUnavailableException or OrleansMessageRejectionException
        || (e is TimeoutException && e.Source?.StartsWith("Orleans", StringComparison.Ordinal) == true);

    private static RpcException Unavailable(Exception e) =>
        new(new Status(StatusCode.Unavailable, "a cluster member was lost; retry (its robots are moving to the other silos)", e));
}
