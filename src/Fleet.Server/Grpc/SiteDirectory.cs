using System.Collections.Concurrent;
using Fleet.Grains.Registry;

namespace Fleet.Server.Grpc;

/// <summary>
/// Remembers which sites exist so ingest does not hit the registry per batch. Sites are never deleted, so a
/// positive answer never goes stale; unknown ids are looked up again each time.
/// </summary>
internal sealed class SiteDirectory(ISiteRegistry registry)
{
    private readonly ConcurrentDictionary<string, bool> _known = new(StringComparer.Ordinal);

    public bool Exists(string siteId)
    {
        if (_known.ContainsKey(siteId))
        {
            return true;
        }

        if (registry.GetSite(siteId) is null)
        {
            return false;
        }

        _known.TryAdd(siteId, true);
        return true;
    }
}
