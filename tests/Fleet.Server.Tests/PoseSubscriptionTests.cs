using System.Diagnostics.Metrics;
using Fleet.Grains;
using Fleet.Grains.Streaming;
using Fleet.Grains.Telemetry;
using Microsoft.Extensions.DependencyInjection;

namespace Fleet.Server.Tests;

/// <summary>The fan-out queue: a slow subscriber keeps the latest pose per robot, bounded, with drops counted.</summary>
public sealed class PoseSubscriptionTests
{
    [Fact]
    public void Offer_SameRobotTwiceBeforeDrain_KeepsLatestAndCountsOneDrop()
    {
        using var services = NewHub(out var hub);
        using var subscription = hub.Subscribe(new PoseFilter { SiteId = "s" }, capacity: 8);

        hub.Publish(Pose("s", "tug-01", 1.0));
        hub.Publish(Pose("s", "tug-01", 2.0));
        hub.Publish(Pose("s", "tug-02", 1.5));

        var drained = new List<PoseSnapshot>();
        subscription.Drain(drained, 10);
        Assert.Equal(2, drained.Count);
        Assert.Equal(2.0, drained.Single(p => p.RobotId == "tug-01").Time, 12);
        Assert.Equal(1, subscription.Dropped);
    }

    [Fact]
    public void Offer_MoreRobotsThanCapacity_EvictsOldestAndStaysBounded()
    {
        using var services = NewHub(out var hub);
        using var subscription = hub.Subscribe(new PoseFilter { SiteId = "s" }, capacity: 3);

        for (var i = 0; i < 10; i++)
        {
            hub.Publish(Pose("s", $"tug-{i:00}", i));
        }

        Assert.Equal(3, subscription.PendingCount);
        Assert.Equal(7, subscription.Dropped);
        var drained = new List<PoseSnapshot>();
        subscription.Drain(drained, 10);
        Assert.Equal(["tug-07", "tug-08", "tug-09"], drained.Select(p => p.RobotId));
    }

    [Fact]
    public void Publish_OtherSiteOrOutsideZone_IsNotQueued()
    {
        using var services = NewHub(out var hub);
        using var subscription = hub.Subscribe(new PoseFilter { SiteId = "s", ZoneMin = new Vec3(0, 0, 0), ZoneMax = new Vec3(5, 5, 2) }, capacity: 8);

        hub.Publish(Pose("other", "tug-01", 1.0));
        hub.Publish(Pose("s", "tug-02", 1.0, x: 6));
        hub.Publish(Pose("s", "tug-03", 1.0, x: 4));

        var drained = new List<PoseSnapshot>();
        subscription.Drain(drained, 10);
        Assert.Equal("tug-03", Assert.Single(drained).RobotId);
    }

    [Fact]
    public void Dispose_Subscription_StopsReceiving()
    {
        using var services = NewHub(out var hub);
        var subscription = hub.Subscribe(new PoseFilter { SiteId = "s" }, capacity: 8);
        Assert.Equal(1, hub.SubscriberCount);
        subscription.Dispose();
        Assert.Equal(0, hub.SubscriberCount);
        hub.Publish(Pose("s", "tug-01", 1.0));
        Assert.Equal(0, subscription.PendingCount);
    }

    private static ServiceProvider NewHub(out PoseHub hub)
    {
        var services = new ServiceCollection().AddMetrics().BuildServiceProvider();
        hub = new PoseHub(new FleetInstruments(services.GetRequiredService<IMeterFactory>()));
        return services;
    }

    private static PoseSnapshot Pose(string site, string robot, double time, double x = 1) => new()
    {
        SiteId = site,
        RobotId = robot,
        Time = time,
        Position = new Vec3(x, 1, 0.5),
        Covariance = new double[49],
    };
}

/// <summary>Per-robot rate cap: updates inside a robot's interval are held back and coalesced, never lost.</summary>
public sealed class PoseSubscriptionRateCapTests
{
    [Fact]
    public void Drain_SecondUpdateInsideInterval_HeldUntilSlotOpensThenLatestSent()
    {
        var time = new ManualTime();
        var services = new ServiceCollection().AddMetrics().BuildServiceProvider();
        var hub = new PoseHub(new FleetInstruments(services.GetRequiredService<IMeterFactory>()));
        using var subscription = hub.Subscribe(new PoseFilter { SiteId = "s", MaxRatePerRobotHz = 10 }, capacity: 8, time);
        var drained = new List<PoseSnapshot>();

        hub.Publish(Pose(1.0));
        Assert.Null(subscription.Drain(drained, 10));
        Assert.Single(drained);

        // 20 ms later two more updates: both inside the 100 ms slot, so they wait and coalesce to the newer.
        time.Advance(TimeSpan.FromMilliseconds(20));
        hub.Publish(Pose(1.02));
        hub.Publish(Pose(1.04));
        drained.Clear();
        var wait = subscription.Drain(drained, 10);
        Assert.Empty(drained);
        Assert.NotNull(wait);
        Assert.InRange(wait.Value.TotalMilliseconds, 79.0, 81.0);

        time.Advance(TimeSpan.FromMilliseconds(80));
        Assert.Null(subscription.Drain(drained, 10));
        Assert.Equal(1.04, Assert.Single(drained).Time, 12);
        Assert.Equal(1, subscription.Dropped);
        services.Dispose();
    }

    private static PoseSnapshot Pose(double time) => new()
    {
        SiteId = "s",
        RobotId = "tug-01",
        Time = time,
        Position = new Vec3(1, 1, 0.5),
        Covariance = new double[49],
    };

    /// <summary>A clock that moves only when told.</summary>
    private sealed class ManualTime : TimeProvider
    {
        private long _ticks;

        public override long TimestampFrequency => 1_000_000;

        public override long GetTimestamp() => _ticks;

        public void Advance(TimeSpan by) => _ticks += (long)(by.TotalSeconds * TimestampFrequency);
    }
}
