using Grpc.Core;

namespace Fleet.Server.Clients;

/// <summary>
/// How <see cref="ReconnectingIngestStream"/> reconnects: the n-th consecutive failed attempt (n = 0, 1, …) waits a
/// random time in [0, min(<see cref="MaxBackoff"/>, <see cref="InitialBackoff"/> · <see cref="Multiplier"/>ⁿ)]
/// ("full jitter", so a fleet of gateways cut off together does not reconnect in lock step), and the count starts
/// again after the first acknowledgement on a new stream. Only transient status codes are retried; after
/// <see cref="MaxOutage"/> without an acknowledgement the stream gives up.
/// </summary>
public sealed record IngestRetryPolicy
{
    /// <summary>Upper bound of the first wait. Default 100 ms.</summary>
    public TimeSpan InitialBackoff { get; init; } = TimeSpan.FromMilliseconds(100);

    /// <summary>Growth of the bound per failed attempt. Default 2.</summary>
    public double Multiplier { get; init; } = 2;

    /// <summary>Cap of the bound. Default 5 s.</summary>
    public TimeSpan MaxBackoff { get; init; } = TimeSpan.FromSeconds(5);

    /// <summary>Give up when no acknowledgement arrived for this long while batches were waiting. Default 5 minutes.</summary>
    public TimeSpan MaxOutage { get; init; } = TimeSpan.FromMinutes(5);

    /// <summary>Status codes worth another attempt: the server is away, restarting, overloaded, or the connection broke.</summary>
    public IReadOnlySet<StatusCode> RetryableStatusCodes { get; init; } = new HashSet<StatusCode>
    {
        StatusCode.Unavailable,
        StatusCode.Internal,
        StatusCode.Unknown,
        StatusCode.Aborted,
        StatusCode.ResourceExhausted,
        StatusCode.DeadlineExceeded,
        StatusCode.Cancelled,
    };

    /// <summary>The wait before attempt <paramref name="failures"/> + 1, drawn from <paramref name="random"/>.</summary>
    public TimeSpan Backoff(int failures, Random random)
    {
        ArgumentNullException.ThrowIfNull(random);
        var bound = InitialBackoff.TotalMilliseconds * Math.Pow(Multiplier, Math.Min(failures, 30));
        bound = Math.Min(bound, MaxBackoff.TotalMilliseconds);
        return TimeSpan.FromMilliseconds(random.NextDouble() * bound);
    }
}
