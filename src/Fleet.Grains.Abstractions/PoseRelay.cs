using Orleans.Concurrency;

namespace Fleet.Grains;

/// <summary>
/// A silo's receiver of poses produced on other silos (a grain observer: calls go straight to the silo that created
/// it). One-way, so a slow or lost receiver never holds up the sending silo.
/// </summary>
public interface IPoseRelayObserver : IGrainObserver
{
    [OneWay]
    Task Deliver(PoseSnapshot[] poses);
}

/// <summary>
/// One per site: which silos have open pose streams of the site. Silos renew their entry while they have subscribers
/// (a lease), so an entry of a lost silo simply expires and a reactivated feed grain is refilled within one renewal.
/// </summary>
public interface IPoseFeedGrain : IGrainWithStringKey
{
    /// <summary>Adds or renews <paramref name="siloKey"/>'s receiver for <paramref name="lease"/>.</summary>
    Task Subscribe(string siloKey, IPoseRelayObserver receiver, TimeSpan lease);

    Task Unsubscribe(string siloKey);

    /// <summary>Receivers whose lease has not run out.</summary>
    Task<PoseFeedMember[]> GetMembers();
}

/// <summary>A silo (its parsable address) and its pose receiver.</summary>
[GenerateSerializer, Immutable]
public sealed record PoseFeedMember([property: Id(0)] string SiloKey, [property: Id(1)] IPoseRelayObserver Receiver);
