using Fleet.Contracts.V1;
using Fleet.Grains;
using Microsoft.Extensions.DependencyInjection;

namespace Fleet.Server.Tests;

public sealed class RobotLifecycleTests
{
    [Fact]
    public async Task Ingest_ThenIdle_RobotFilterLoadedOnFirstDataAndUnloadedWhenIdle()
    {
        // A one-second idle timeout; Orleans looks for idle grains every half timeout.
        await using var server = await ServerHarness.StartAsync(settings: new Dictionary<string, string?> { ["Fleet:Grains:RobotIdleTimeout"] = "00:00:01" });
        var deadline = DateTime.UtcNow.AddSeconds(30);
        await server.Sites.CreateSiteAsync(new CreateSiteRequest { SiteId = "idle" }, deadline: deadline);
        await server.Sites.PutAnchorMapAsync(TestScenario.AnchorMapRequest("idle"), deadline: deadline);
        var site = server.App.Services.GetRequiredService<IGrainFactory>().GetGrain<ISiteGrain>("idle");
        Assert.Empty(await site.GetAttachedRobots());

        var batch = new MeasurementBatch { SiteId = "idle" };
        batch.Robots.Add(TestScenario.StaticTagSamples("tug-01", (5, 5, 0.5), 0, 50));
        await server.Ingest.SubmitMeasurementsAsync(new SubmitMeasurementsRequest { Batch = batch }, deadline: deadline);
        Assert.Equal(["tug-01"], await site.GetAttachedRobots());

        // Wait (bounded) for the idle robot to be unloaded: it detaches from its site when deactivated.
        var attached = await site.GetAttachedRobots();
        for (var i = 0; i < 300 && attached.Length > 0; i++)
        {
            await Task.Delay(100);
            attached = await site.GetAttachedRobots();
        }

        Assert.Empty(attached);
    }
}
