using System.Collections.Concurrent;
using Fleet.Estimation.Anchors;
using Fleet.Estimation.Bias;
using Fleet.Grains.Registry;

namespace Fleet.Grains.Models;

/// <summary>
/// Per-silo cache of parsed anchor maps and bias models by (site, version). Versions are immutable once stored,
/// so entries never go stale; a robot grain asks for the version its site grain told it to use.
/// </summary>
public sealed class SiteModelCache(ISiteRegistry registry, IBiasModelLoader biasModelLoader)
{
    private readonly ConcurrentDictionary<(string, int), AnchorMap> _maps = new();
    private readonly ConcurrentDictionary<(string, int), ITdoaBiasModel> _models = new();

    /// <summary>The anchor map of that version, or null when the version is 0 or unknown.</summary>
    public AnchorMap? GetAnchorMap(string siteId, int version)
    {
        if (version <= 0)
        {
            return null;
        }

        if (_maps.TryGetValue((siteId, version), out var map))
        {
            return map;
        }

        var entry = registry.GetAnchorMap(siteId, version);
        if (entry is null)
        {
            return null;
        }

        map = AnchorMap.Create(siteId, entry.Anchors);
        return _maps.GetOrAdd((siteId, version), map);
    }

    /// <summary>A fresh per-robot instance of that model version, or null when the version is 0 or unknown.</summary>
    public ITdoaBiasModel? CreateBiasModel(string siteId, int version)
    {
        if (version <= 0)
        {
            return null;
        }

        if (!_models.TryGetValue((siteId, version), out var loaded))
        {
            var bytes = registry.GetBiasModelBytes(siteId, version);
            if (bytes is null)
            {
                return null;
            }

            loaded = _models.GetOrAdd((siteId, version), biasModelLoader.Load(bytes));
        }

        return biasModelLoader.CreateInstance(loaded);
    }
}
