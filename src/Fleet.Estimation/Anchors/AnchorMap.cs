using System.Collections.Frozen;
using Fleet.Estimation.Geometry;

namespace Fleet.Estimation.Anchors;

/// <summary>
/// A validated, immutable set of anchors. Anchors are addressed by a dense index on the hot path
/// (see <see cref="Measurements.TdoaMeasurement"/>) and by id at the edges.
/// Build with <see cref="Create"/>, which refuses maps with errors.
/// </summary>
public sealed class AnchorMap
{
    /// <summary>Anchors closer than this are treated as coincident (metres).</summary>
    public const double CoincidenceToleranceMetres = 0.05;

    /// <summary>Below this vertical spread height is weakly observable (metres); common practice for ceiling-mounted constellations.</summary>
    public const double WeakVerticalSpreadMetres = 3.0;

    /// <summary>A 3-D TDOA fix needs at least four anchors (three independent differences).</summary>
    public const int MinimumAnchorsFor3D = 4;

    private readonly Anchor[] _anchors;
    private readonly FrozenDictionary<string, int> _indexById;

    private AnchorMap(string siteId, Anchor[] anchors, IReadOnlyList<AnchorMapIssue> warnings)
    {
        SiteId = siteId;
        _anchors = anchors;
        _indexById = anchors.Select((a, i) => (a.Id, i)).ToFrozenDictionary(p => p.Id, p => p.i, StringComparer.Ordinal);
        Warnings = warnings;
        Positions = anchors.Select(a => a.Position).ToArray();
    }

    public string SiteId { get; }

    public IReadOnlyList<Anchor> Anchors => _anchors;

    public int Count => _anchors.Length;

    public Anchor this[int index] => _anchors[index];

    /// <summary>Anchor positions by index, for hot loops.</summary>
    public IReadOnlyList<Vector3D> Positions { get; }

    /// <summary>Non-fatal findings of validation (too few anchors, weak vertical geometry…).</summary>
    public IReadOnlyList<AnchorMapIssue> Warnings { get; }

    public bool TryGetIndex(string id, out int index) => _indexById.TryGetValue(id, out index);

    public int IndexOf(string id) => _indexById.TryGetValue(id, out var index)
        ? index
        : throw new KeyNotFoundException($"anchor '{id}' is not in the map of site '{SiteId}'");

    /// <summary>Validates and builds a map; throws <see cref="AnchorMapException"/> listing every error.</summary>
    public static AnchorMap Create(string siteId, IEnumerable<Anchor> anchors)
    {
        var list = anchors.ToArray();
        var issues = Validate(list);
        var errors = issues.Where(i => i.Severity == IssueSeverity.Error).ToArray();
        if (errors.Length > 0)
        {
            throw new AnchorMapException(siteId, errors);
        }

        return new AnchorMap(siteId, list, issues.Where(i => i.Severity == IssueSeverity.Warning).ToArray());
    }

    /// <summary>All errors and warnings for a candidate anchor set, without throwing.</summary>
    public static IReadOnlyList<AnchorMapIssue> Validate(IReadOnlyList<Anchor> anchors)
    {
        var issues = new List<AnchorMapIssue>();
        var seen = new Dictionary<string, int>(StringComparer.Ordinal);
        foreach (var anchor in anchors)
        {
            if (string.IsNullOrWhiteSpace(anchor.Id))
            {
                issues.Add(new(IssueSeverity.Error, AnchorMapIssueCode.EmptyId, "an anchor has an empty id", [anchor.Id ?? string.Empty]));
                continue;
            }

            if (!seen.TryAdd(anchor.Id, 1))
            {
                issues.Add(new(IssueSeverity.Error, AnchorMapIssueCode.DuplicateId, $"anchor id '{anchor.Id}' appears more than once", [anchor.Id]));
            }

            if (!anchor.Position.IsFinite || !anchor.OrientationDegrees.IsFinite || !double.IsFinite(anchor.AntennaDelayMetres))
            {
                issues.Add(new(IssueSeverity.Error, AnchorMapIssueCode.NonFiniteValue,
                    $"anchor '{anchor.Id}' has a non-finite position, orientation or antenna delay", [anchor.Id]));
            }
        }

        var finite = anchors.Where(a => a.Position.IsFinite && !string.IsNullOrWhiteSpace(a.Id)).ToArray();
        for (var i = 0; i < finite.Length; i++)
        {
            for (var j = i + 1; j < finite.Length; j++)
            {
                var d = Vector3D.Distance(finite[i].Position, finite[j].Position);
                if (d < CoincidenceToleranceMetres && finite[i].Id != finite[j].Id)
                {
                    issues.Add(new(IssueSeverity.Error, AnchorMapIssueCode.CoincidentAnchors,
                        FormattableString.Invariant($"anchors '{finite[i].Id}' and '{finite[j].Id}' are {d:0.000} m apart (closer than {CoincidenceToleranceMetres} m)"),
                        [finite[i].Id, finite[j].Id]));
                }
            }
        }

        if (finite.Length < MinimumAnchorsFor3D)
        {
            issues.Add(new(IssueSeverity.Warning, AnchorMapIssueCode.TooFewAnchors,
                $"{finite.Length} anchors: at least {MinimumAnchorsFor3D} are needed for a 3-D TDOA fix", finite.Select(a => a.Id).ToArray()));
        }

        if (finite.Length >= 2)
        {
            var spread = finite.Max(a => a.Position.Z) - finite.Min(a => a.Position.Z);
            if (spread < WeakVerticalSpreadMetres)
            {
                issues.Add(new(IssueSeverity.Warning, AnchorMapIssueCode.SmallVerticalSpread,
                    FormattableString.Invariant($"anchor heights span only {spread:0.00} m (< {WeakVerticalSpreadMetres} m): height is weakly observable; hold tag height with a floor prior"),
                    []));
            }
        }

        return issues;
    }
}

/// <summary>Thrown when an anchor map has errors; carries every error, not just the first.</summary>
public sealed class AnchorMapException(string siteId, IReadOnlyList<AnchorMapIssue> errors)
    : Exception($"anchor map of site '{siteId}' is invalid: " + string.Join("; ", errors.Select(e => e.Message)))
{
    public IReadOnlyList<AnchorMapIssue> Errors { get; } = errors;
}
