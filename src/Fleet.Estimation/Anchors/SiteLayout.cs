using Fleet.Estimation.Geometry;

namespace Fleet.Estimation.Anchors;

/// <summary>What a site file describes: the anchor map plus optional known obstacles (racks) and floor extent.</summary>
public sealed record SiteLayout(AnchorMap Anchors, IReadOnlyList<AxisAlignedBox> Racks, AxisAlignedBox? Floor = null)
{
    public string SiteId => Anchors.SiteId;
}
