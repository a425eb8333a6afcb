using System.Threading.RateLimiting;
using Google.Protobuf.WellKnownTypes;
using Google.Rpc;
using Grpc.Core;
using Microsoft.AspNetCore.Http.Features;
using Microsoft.AspNetCore.RateLimiting;

namespace Fleet.Server.Security;

/// <summary>
/// Per-client token buckets (System.Threading.RateLimiting) for messages inside ingest streams, which the ASP.NET Core
/// rate-limiting middleware (it limits calls) cannot see. The partition is the
/// authenticated name, else the remote address.
/// </summary>
public sealed class ClientRateLimits : IDisposable
{
    private readonly PartitionedRateLimiter<string>? _streamMessages;

    public ClientRateLimits(FleetSecurityOptions options)
    {
        var o = options.RateLimit;
        _streamMessages = o.StreamMessagesPerSecond > 0
            ? PartitionedRateLimiter.Create<string, string>(key => RateLimitPartition.GetTokenBucketLimiter(key,
                _ => BucketOptions(o.StreamMessagesPerSecond, o.StreamMessageBurst, queue: o.StreamMessageBurst)))
            : null;
    }

    public static string ClientKey(HttpContext context) =>
        context.User.Identity?.IsAuthenticated == true
            ? $"user:{context.User.Identity.Name}"
            : $"address:{context.Connection.RemoteIpAddress}";

    /// <summary>
    /// Takes one stream-message token for the caller, waiting while the client is over its rate (backpressure through
    /// HTTP/2 flow control); when even the wait queue is full the stream fails RESOURCE_EXHAUSTED with a retry delay.
    /// </summary>
    public async ValueTask AcquireStreamMessageAsync(ServerCallContext context)
    {
        if (_streamMessages is null)
        {
            return;
        }

        using var lease = await _streamMessages.AcquireAsync(ClientKey(context.GetHttpContext()), 1, context.CancellationToken);
        if (!lease.IsAcquired)
        {
            var status = new Google.Rpc.Status
            {
                Code = (int)Code.ResourceExhausted,
                Message = "ingest stream message rate limit exceeded for this client",
                Details = { Any.Pack(new RetryInfo { RetryDelay = Duration.FromTimeSpan(TimeSpan.FromSeconds(1)) }) },
            };
            throw status.ToRpcException();
        }
    }

    /// <summary>
    /// Answers a call the middleware refused as gRPC RESOURCE_EXHAUSTED (a trailers-only response), rather than the
    /// middleware's HTTP 503, which clients would read as UNAVAILABLE and retry at once.
    /// </summary>
    public static ValueTask RejectAsGrpc(OnRejectedContext rejected, CancellationToken cancellationToken)
    {
        var response = rejected.HttpContext.Response;
        response.StatusCode = StatusCodes.Status200OK;
        response.ContentType = "application/grpc";
        response.Headers["grpc-status"] = ((int)StatusCode.ResourceExhausted).ToString(System.Globalization.CultureInfo.InvariantCulture);
        response.Headers["grpc-message"] = "call rate limit exceeded for this client";
        if (rejected.Lease.TryGetMetadata(MetadataName.RetryAfter, out var retryAfter))
        {
            response.Headers["retry-after"] = ((int)Math.Ceiling(retryAfter.TotalSeconds)).ToString(System.Globalization.CultureInfo.InvariantCulture);
        }

        rejected.HttpContext.Features.Get<IHttpResponseBodyFeature>()?.DisableBuffering();
        return ValueTask.CompletedTask;
    }

    public void Dispose()
    {
        _streamMessages?.Dispose();
    }

    /// <summary>A token bucket holding <paramref name="burst"/> tokens, refilled at <paramref name="perSecond"/>.</summary>
    public static TokenBucketRateLimiterOptions BucketOptions(int perSecond, int burst, int queue) => new()
    {
        TokenLimit = Math.Max(1, Math.Max(burst, perSecond / 10)),
        // Refill ten times a second (once per token for slow rates) so a client is not held up for a whole second.
        TokensPerPeriod = perSecond >= 10 ? perSecond / 10 : 1,
        ReplenishmentPeriod = perSecond >= 10 ? TimeSpan.FromMilliseconds(100) : TimeSpan.FromSeconds(1.0 / perSecond),
        AutoReplenishment = true,
        QueueLimit = queue,
        QueueProcessingOrder = QueueProcessingOrder.OldestFirst,
    };
}
