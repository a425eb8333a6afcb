using Fleet.Estimation.Anchors;
using Fleet.Estimation.Geometry;

namespace Fleet.Estimation.Tests;

/// <summary>Invented test sites for the fictional "Harbor Point DC".</summary>
internal static class TestSites
{
    /// <summary>Four anchors on a 10 m square at z = 0 (the CHECKS.md §5 fixture).</summary>
    public static AnchorMap Square() => AnchorMap.Create("harbor-point-square",
    [
        new Anchor("HP-A01", new Vector3D(0, 0, 0), Vector3D.Zero),
        new Anchor("HP-A02", new Vector3D(10, 0, 0), Vector3D.Zero),
        new Anchor("HP-A03", new Vector3D(10, 10, 0), Vector3D.Zero),
        new Anchor("HP-A04", new Vector3D(0, 10, 0), Vector3D.Zero),
    ]);

    /// <summary>
    /// A 30 m × 20 m aisle block with eight anchors alternating between 2.0 m and 7.0 m (5 m vertical spread),
    /// two of them with a small antenna delay.
    /// </summary>
    public static AnchorMap Hall() => AnchorMap.Create("harbor-point-dc",
    [
        new Anchor("HP-A01", new Vector3D(0, 0, 7.0), Vector3D.Zero),
        new Anchor("HP-A02", new Vector3D(15, -1, 2.0), Vector3D.Zero, 0.05),
        new Anchor("HP-A03", new Vector3D(30, 0, 7.0), Vector3D.Zero),
        new Anchor("HP-A04", new Vector3D(31, 10, 2.0), Vector3D.Zero),
        new Anchor("HP-A05", new Vector3D(30, 20, 7.0), Vector3D.Zero, -0.03),
        new Anchor("HP-A06", new Vector3D(15, 21, 2.0), Vector3D.Zero),
        new Anchor("HP-A07", new Vector3D(0, 20, 7.0), Vector3D.Zero),
        new Anchor("HP-A08", new Vector3D(-1, 10, 2.0), Vector3D.Zero),
    ]);
}
