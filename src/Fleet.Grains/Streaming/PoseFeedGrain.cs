namespace Fleet.Grains.Streaming;

/// <summary>
/// Keeps the leased pose receivers of one site's subscribing silos (see <see cref="IPoseFeedGrain"/>). Holds nothing
/// durable: after a silo loss it is rebuilt by the next renewals.
/// </summary>
public sealed class PoseFeedGrain(TimeProvider time) : Grain, IPoseFeedGrain
{
    private readonly Dictionary<string, (IPoseRelayObserver Receiver, DateTimeOffset Expires)> _members = new(StringComparer.Ordinal);

    public Task Subscribe(string siloKey, IPoseRelayObserver receiver, TimeSpan lease)
    {
        _members[siloKey] = (receiver, time.GetUtcNow() + lease);
        return Task.CompletedTask;
    }

    public Task Unsubscribe(string siloKey)
    {
        _members.Remove(siloKey);
        return Task.CompletedTask;
    }

    public Task<PoseFeedMember[]> GetMembers()
    {
        var now = time.GetUtcNow();
        var members = new List<PoseFeedMember>(_members.Count);
        foreach (var (silo, entry) in _members.ToArray())
        {
            if (entry.Expires < now)
            {
                _members.Remove(silo);
            }
            else
            {
                members.Add(new PoseFeedMember(silo, entry.Receiver));
            }
        }

        return Task.FromResult(members.ToArray());
    }
}
