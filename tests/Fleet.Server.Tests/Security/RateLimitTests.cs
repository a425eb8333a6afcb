using Fleet.Contracts.V1;
using Grpc.Core;
using Grpc.Health.V1;

namespace Fleet.Server.Tests.Security;

/// <summary>
/// Per-client rate limits on a real server: a client over its call budget gets RESOURCE_EXHAUSTED ("some resource has
/// been exhausted, perhaps a per-user quota", grpc/grpc doc/statuscodes.md) while another client and health probes
/// are unaffected; an ingest stream over its message rate is slowed, not failed.
/// </summary>
public sealed class RateLimitTests
{
    private static readonly TimeSpan Timeout = TimeSpan.FromSeconds(30);

    [Fact]
    public async Task Calls_OverOneClientsBudget_ResourceExhaustedForThatClientOnly()
    {
        var settings = SecureServer.KeySettings();
        settings["Fleet:Security:RateLimit:CallsPerSecond"] = "1";
        settings["Fleet:Security:RateLimit:CallBurst"] = "2";
        settings["Fleet:Security:RateLimit:StreamMessagesPerSecond"] = "2";
        settings["Fleet:Security:RateLimit:StreamMessageBurst"] = "1";
        await using var server = await ServerHarness.StartAsync(settings: settings);
        await server.Sites.CreateSiteAsync(new CreateSiteRequest { SiteId = "sec-a" }, SecureServer.As("admin-all"), Deadline());

        // Twenty calls in a row against a bucket of two refilled once a second: most must be refused.
        var codes = new List<StatusCode>();
        for (var i = 0; i < 20; i++)
        {
            codes.Add(await CodeOf(() => server.Sites.ListSitesAsync(new ListSitesRequest(), SecureServer.As("admin-all"), Deadline()).ResponseAsync));
        }

        var other = await CodeOf(() => server.Sites.ListSitesAsync(new ListSitesRequest(), SecureServer.As("admin-a"), Deadline()).ResponseAsync);
        var probes = new List<HealthCheckResponse.Types.ServingStatus>();
        for (var i = 0; i < 10; i++)
        {
            probes.Add((await new Health.HealthClient(server.Channel).CheckAsync(new HealthCheckRequest(), deadline: Deadline())).Status);
        }

        Assert.Contains(StatusCode.ResourceExhausted, codes);
        Assert.All(codes, c => Assert.True(c is StatusCode.OK or StatusCode.ResourceExhausted, c.ToString()));
        Assert.Equal(StatusCode.OK, other);
        Assert.All(probes, p => Assert.Equal(HealthCheckResponse.Types.ServingStatus.Serving, p));

        // ASP.NET Core's built-in rate-limiting meter counts the refusals (aspnetcore.rate_limiting.requests with
        // aspnetcore.rate_limiting.result = global_limiter; ASP.NET Core built-in metrics docs, from memory).
        var metrics = await server.ScrapeMetricsAsync();
        Assert.Contains(metrics.Split('\n'), line => line.StartsWith("aspnetcore_rate_limiting_requests", StringComparison.Ordinal)
            && line.Contains("global_limiter", StringComparison.Ordinal));

        // The stream's batches beyond the message rate wait for tokens; every one is still acknowledged, in order.
        using var call = server.Ingest.StreamMeasurements(SecureServer.As("gateway-a"), Deadline());
        for (ulong id = 1; id <= 3; id++)
        {
            await call.RequestStream.WriteAsync(new StreamMeasurementsRequest { Batch = new MeasurementBatch { SiteId = "sec-a", BatchId = id } });
        }

        await call.RequestStream.CompleteAsync();
        var acks = new List<ulong>();
        while (await call.ResponseStream.MoveNext())
        {
            acks.Add(call.ResponseStream.Current.Ack.BatchId);
        }

        Assert.Equal([1UL, 2UL, 3UL], acks);
    }

    private static async Task<StatusCode> CodeOf(Func<Task> call)
    {
        try
        {
            await call();
            return StatusCode.OK;
        }
        catch (RpcException e)
        {
            return e.StatusCode;
        }
    }

    private static DateTime Deadline() => DateTime.UtcNow.Add(Timeout);
}
