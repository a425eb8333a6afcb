using System.Collections.Concurrent;
using Fleet.Grains;
using Fleet.Grains.Streaming;
using Microsoft.Extensions.Options;
using Orleans.Runtime;

namespace Fleet.Server.Cluster;

/// <summary>
/// Carries poses between silos so a pose stream opened on any silo sees every robot of its site, wherever the robot's
/// grain lives. Per site, a <see cref="IPoseFeedGrain"/> lists the silos with open streams (leased entries renewed
/// while they have subscribers). Robot grains publish into the local <see cref="PoseHub"/> as before; the hub hands
/// each pose to <see cref="Enqueue"/>, which only replaces the robot's entry in a per-site map (latest pose wins, so
/// ingest never waits). Every <see cref="FleetClusterOptions.RelayInterval"/> the pending poses of each site go in one
/// one-way call to each subscribing silo's <see cref="IPoseRelayObserver"/>; receivers of silos that membership no
/// longer lists as active are skipped. The choice over Orleans streams: no queue or pub-sub store to run, no
/// per-pose grain call, and a lost silo costs at most one lease of that silo's stale entry.
/// </summary>
public sealed partial class ClusterPoseRelay(
    PoseHub hub,
    IGrainFactory grains,
    ILocalSiloDetails localSilo,
    IClusterMembershipService membership,
    IOptions<FleetClusterOptions> options,
    ILogger<ClusterPoseRelay> logger) : IPoseRelayObserver, ILifecycleParticipant<ISiloLifecycle>
{
    private readonly ConcurrentDictionary<string, ConcurrentDictionary<string, PoseSnapshot>> _pending = new(StringComparer.Ordinal);
    private readonly ConcurrentDictionary<string, (PoseFeedMember[] Members, long FetchedAt)> _members = new(StringComparer.Ordinal);
    private readonly HashSet<string> _registeredSites = new(StringComparer.Ordinal);
    private readonly SemaphoreSlim _renewNow = new(0);
    private readonly CancellationTokenSource _stop = new();
    private IPoseRelayObserver? _self;
    private string _selfKey = string.Empty;
    private Task _loops = Task.CompletedTask;
    private long _relayed;

    /// <summary>Poses this silo has sent to other silos so far (for tests and figures).</summary>
    public long Relayed => Interlocked.Read(ref _relayed);

    public void Participate(ISiloLifecycle lifecycle) =>
        lifecycle.Subscribe(nameof(ClusterPoseRelay), ServiceLifecycleStage.Active, StartAsync, StopAsync);

    public Task Deliver(PoseSnapshot[] poses)
    {
        foreach (var pose in poses)
        {
            hub.Deliver(pose);
        }

        return Task.CompletedTask;
    }

    /// <summary>Called by the hub for every local pose: one dictionary write, never a wait.</summary>
    public void Enqueue(PoseSnapshot pose)
    {
        if (_members.TryGetValue(pose.SiteId, out var known) && !HasRemote(known.Members))
        {
            return;
        }

        _pending.GetOrAdd(pose.SiteId, static _ => new ConcurrentDictionary<string, PoseSnapshot>(StringComparer.Ordinal))[pose.RobotId] = pose;
    }

    private Task StartAsync(CancellationToken cancellationToken)
    {
        _selfKey = localSilo.SiloAddress.ToParsableString();
        _self = grains.CreateObjectReference<IPoseRelayObserver>(this);
        hub.Outbound = Enqueue;
        hub.SubscriptionOpened += OnSubscriptionOpened;
        _loops = Task.WhenAll(RunAsync(RelayLoopAsync), RunAsync(RenewLoopAsync));
        return Task.CompletedTask;
    }

    private async Task StopAsync(CancellationToken cancellationToken)
    {
        hub.Outbound = null;
        hub.SubscriptionOpened -= OnSubscriptionOpened;
        await _stop.CancelAsync();
        await _loops;
        foreach (var site in _registeredSites)
        {
            try
            {
                await grains.GetGrain<IPoseFeedGrain>(site).Unsubscribe(_selfKey).WaitAsync(TimeSpan.FromSeconds(2), cancellationToken);
            }
            catch (Exception e) when (e is not OperationCanceledException || !cancellationToken.IsCancellationRequested)
            {
                // Leaving anyway: the lease runs out.
            }
        }
    }

    private void OnSubscriptionOpened(string siteId) => _renewNow.Release();

    private async Task RunAsync(Func<CancellationToken, Task> loop)
    {
        try
        {
            await loop(_stop.Token);
        }
        catch (OperationCanceledException) when (_stop.IsCancellationRequested)
        {
            // Stopping.
        }
    }

    private async Task RelayLoopAsync(CancellationToken ct)
    {
        var o = options.Value;
        using var timer = new PeriodicTimer(o.RelayInterval);
        var refreshTicks = (long)(o.FeedRenewal.TotalSeconds / 2 * TimeProvider.System.TimestampFrequency);
        while (await timer.WaitForNextTickAsync(ct))
        {
            foreach (var (site, robots) in _pending)
            {
                if (robots.IsEmpty)
                {
                    continue;
                }

                var members = await MembersAsync(site, refreshTicks);
                var batch = Take(robots);
                if (batch.Length == 0)
                {
                    continue;
                }

                foreach (var member in members)
                {
                    if (IsRemoteAndActive(member))
                    {
                        Send(member, batch);
                    }
                }
            }

            // Sites nobody elsewhere listens to are looked at again once their member list is due for a refresh.
            foreach (var (site, entry) in _members)
            {
                if (!HasRemote(entry.Members) && TimeProvider.System.GetTimestamp() - entry.FetchedAt > refreshTicks)
                {
                    _members.TryRemove(site, out _);
                }
            }
        }
    }

    private async Task<PoseFeedMember[]> MembersAsync(string site, long refreshTicks)
    {
        var now = TimeProvider.System.GetTimestamp();
        if (_members.TryGetValue(site, out var cached) && now - cached.FetchedAt < refreshTicks)
        {
            return cached.Members;
        }

        try
        {
            var members = await grains.GetGrain<IPoseFeedGrain>(site).GetMembers();
            _members[site] = (members, now);
            return members;
        }
        catch (Exception e) when (e is not OperationCanceledException)
        {
            // The feed grain may be moving after a silo loss; keep the last list until the next try.
            LogFeedUnavailable(logger, e, site);
            return cached.Members ?? [];
        }
    }

    private async Task RenewLoopAsync(CancellationToken ct)
    {
        var o = options.Value;
        var lease = o.FeedRenewal * 3;
        while (!ct.IsCancellationRequested)
        {
            var sites = hub.SubscribedSites();
            foreach (var site in sites)
            {
                try
                {
                    await grains.GetGrain<IPoseFeedGrain>(site).Subscribe(_selfKey, _self!, lease);
                    _registeredSites.Add(site);
                }
                catch (Exception e) when (e is not OperationCanceledException)
                {
                    LogFeedUnavailable(logger, e, site);
                }
            }

            foreach (var site in _registeredSites.Where(s => !sites.Contains(s)).ToList())
            {
                _registeredSites.Remove(site);
                try
                {
                    await grains.GetGrain<IPoseFeedGrain>(site).Unsubscribe(_selfKey);
                }
                catch (Exception e) when (e is not OperationCanceledException)
                {
                    LogFeedUnavailable(logger, e, site);
                }
            }

            await _renewNow.WaitAsync(o.FeedRenewal, ct);
        }
    }

    private void Send(PoseFeedMember member, PoseSnapshot[] batch)
    {
        try
        {
            // One-way: returns once the message is queued for the other silo.
            _ = member.Receiver.Deliver(batch);
            Interlocked.Add(ref _relayed, batch.Length);
        }
        catch (Exception e) when (e is not OperationCanceledException)
        {
            LogSendFailed(logger, e, member.SiloKey);
        }
    }

    private static PoseSnapshot[] Take(ConcurrentDictionary<string, PoseSnapshot> robots)
    {
        var batch = new List<PoseSnapshot>(robots.Count);
        foreach (var robot in robots.Keys)
        {
            if (robots.TryRemove(robot, out var pose))
            {
                batch.Add(pose);
            }
        }

        return [.. batch];
    }

    private bool HasRemote(PoseFeedMember[] members) => members.Any(IsRemoteAndActive);

    private bool IsRemoteAndActive(PoseFeedMember member)
    {
        if (string.Equals(member.SiloKey, _selfKey, StringComparison.Ordinal))
        {
            return false;
        }

        var status = membership.CurrentSnapshot.GetSiloStatus(SiloAddress.FromParsableString(member.SiloKey));
        return status == SiloStatus.Active;
    }

    [LoggerMessage(1, LogLevel.Debug, "Pose feed of site {SiteId} not reachable now; retrying")]
    private static partial void LogFeedUnavailable(ILogger logger, Exception exception, string siteId);

    [LoggerMessage(2, LogLevel.Debug, "Could not relay poses to silo {Silo}")]
    private static partial void LogSendFailed(ILogger logger, Exception exception, string silo);
}
