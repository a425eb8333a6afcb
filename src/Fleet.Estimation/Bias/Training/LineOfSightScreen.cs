using Fleet.Estimation.Anchors;
using Fleet.Estimation.Geometry;

namespace Fleet.Estimation.Bias.Training;

/// <summary>
/// Drops training samples whose anchor–tag line crosses a known obstacle of the site (a rack in the site file).
/// NLOS excess delay through racks is reproducible for a fixed layout, so a network trained on it would learn that
/// layout's racks — which does not transfer to another site. The robust loss handles the NLOS that is not mapped.
/// </summary>
public static class LineOfSightScreen
{
    public static bool IsLineOfSight(IReadOnlyList<AxisAlignedBox> obstacles, in TdoaTrainingSample sample)
    {
        var a = sample.Map[sample.AnchorA].Position;
        var b = sample.Map[sample.AnchorB].Position;
        foreach (var box in obstacles)
        {
            if (box.SegmentLengthInside(sample.TagPosition, a) > 0 || box.SegmentLengthInside(sample.TagPosition, b) > 0)
            {
                return false;
            }
        }

        return true;
    }

    /// <summary>The samples with both links in line of sight of <paramref name="layout"/>'s racks.</summary>
    public static List<TdoaTrainingSample> Keep(SiteLayout layout, IEnumerable<TdoaTrainingSample> samples)
    {
        var kept = new List<TdoaTrainingSample>();
        foreach (var s in samples)
        {
            if (IsLineOfSight(layout.Racks, s))
            {
                kept.Add(s);
            }
        }

        return kept;
    }
}
