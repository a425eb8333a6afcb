using Fleet.Estimation.Anchors;
using Fleet.Estimation.Geometry;

namespace Fleet.Reports.Tests;

/// <summary>Hand-built layouts with known answers.</summary>
internal static class TestLayouts
{
    /// <summary>N anchors evenly spaced on a circle of <paramref name="radius"/> m about the origin, at height <paramref name="z"/>.</summary>
    public static SiteLayout Circle(int n, double radius, double z, AxisAlignedBox floor)
    {
        var anchors = Enumerable.Range(0, n).Select(i =>
        {
            var angle = 2 * Math.PI * i / n;
            return new Anchor($"HP-A{i + 1:00}", new Vector3D(radius * Math.Cos(angle), radius * Math.Sin(angle), z), new Vector3D(180 + (angle * 180 / Math.PI), 0, 0));
        });
        return new SiteLayout(AnchorMap.Create("circle", anchors), [], floor);
    }

    /// <summary>Anchors at the corners of the square [0, side]², all at height <paramref name="z"/>, boresights towards the centre.</summary>
    public static SiteLayout Square(double side, double z, AxisAlignedBox floor, IReadOnlyList<AxisAlignedBox>? racks = null) =>
        new(AnchorMap.Create("square",
        [
            new Anchor("HP-A01", new Vector3D(0, 0, z), new Vector3D(45, 0, 0)),
            new Anchor("HP-A02", new Vector3D(side, 0, z), new Vector3D(135, 0, 0)),
            new Anchor("HP-A03", new Vector3D(side, side, z), new Vector3D(-135, 0, 0)),
            new Anchor("HP-A04", new Vector3D(0, side, z), new Vector3D(-45, 0, 0)),
        ]), racks ?? [], floor);

    public static AxisAlignedBox Floor(double xMin, double yMin, double xMax, double yMax) => new(new Vector3D(xMin, yMin, 0), new Vector3D(xMax, yMax, 0));
}
