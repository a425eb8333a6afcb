using System.Collections.Concurrent;
using Fleet.Estimation.Anchors;
using Fleet.Grains.Models;
using Fleet.Grains.Registry;

namespace Fleet.Server.Validation;

/// <summary>
/// The active anchor map of each site as ingest screening sees it: looked up in the registry at most once per
/// <see cref="RefreshInterval"/> per site, and at once after this host stored a new map (<see cref="Invalidate"/>).
/// Another host's new map is seen within the interval; the robot filters check anchors again with the map they run.
/// </summary>
public sealed class ActiveAnchorMaps(ISiteRegistry registry, SiteModelCache models, TimeProvider time)
{
    public static readonly TimeSpan RefreshInterval = TimeSpan.FromSeconds(1);

    private readonly ConcurrentDictionary<string, Entry> _entries = new(StringComparer.Ordinal);

    /// <summary>The site's active map and its version (null and 0 when the site has none or does not exist).</summary>
    public ActiveAnchorMap GetActive(string siteId)
    {
        var now = time.GetTimestamp();
        if (_entries.TryGetValue(siteId, out var entry) && time.GetElapsedTime(entry.Fetched, now) < RefreshInterval)
        {
            return entry.Active;
        }

        var version = registry.GetSite(siteId)?.AnchorMapVersion ?? 0;
        var map = version > 0 ? models.GetAnchorMap(siteId, version) : null;
        var active = new ActiveAnchorMap(map, map is null ? 0 : version);
        _entries[siteId] = new Entry(active, now);
        return active;
    }

    /// <summary>Forgets the cached map of a site (called after a new map was stored).</summary>
    public void Invalidate(string siteId) => _entries.TryRemove(siteId, out _);

    private sealed record Entry(ActiveAnchorMap Active, long Fetched);
}

/// <summary>An anchor map and the version number it was stored under.</summary>
public readonly record struct ActiveAnchorMap(AnchorMap? Map, int Version);
