using Fleet.Estimation.Anchors;
using Fleet.Estimation.Geometry;

namespace Fleet.Estimation.Tests.Sites;

public class AnchorMapTests
{
    private static Anchor At(string id, double x, double y, double z) => new(id, new Vector3D(x, y, z), Vector3D.Zero);

    [Fact]
    public void Create_DuplicateId_ThrowsWithEveryError()
    {
        var ex = Assert.Throws<AnchorMapException>(() => AnchorMap.Create("s",
        [
            At("A", 0, 0, 3), At("A", 5, 0, 3), At("B", 0, 5, 3), At("C", 5, 5, double.NaN),
        ]));

        Assert.Contains(ex.Errors, e => e.Code == AnchorMapIssueCode.DuplicateId);
        Assert.Contains(ex.Errors, e => e.Code == AnchorMapIssueCode.NonFiniteValue && e.AnchorIds.Contains("C"));
    }

    [Fact]
    public void Create_CoincidentAnchors_IsAnError()
    {
        var ex = Assert.Throws<AnchorMapException>(() => AnchorMap.Create("s",
            [At("A", 0, 0, 3), At("B", 0.01, 0, 3), At("C", 5, 5, 3), At("D", 5, 0, 6)]));
        var error = Assert.Single(ex.Errors);
        Assert.Equal(AnchorMapIssueCode.CoincidentAnchors, error.Code);
    }

    [Fact]
    public void Create_FewAnchorsLowSpread_WarnsButBuilds()
    {
        var map = AnchorMap.Create("s", [At("A", 0, 0, 3), At("B", 10, 0, 3.5), At("C", 0, 10, 4)]);

        Assert.Equal(3, map.Count);
        Assert.Contains(map.Warnings, w => w.Code == AnchorMapIssueCode.TooFewAnchors);
        Assert.Contains(map.Warnings, w => w.Code == AnchorMapIssueCode.SmallVerticalSpread);
        Assert.True(map.TryGetIndex("B", out var b));
        Assert.Equal(1, b);
        Assert.False(map.TryGetIndex("Z", out _));
    }

    [Fact]
    public void Rotation_FollowsZyxConvention()
    {
        // Rz(90°) takes body +x to site +y; Ry(90°) takes +x to −z (right-handed rotation matrices,
        // any robotics text, e.g. Craig, "Introduction to Robotics", ch. 2; from memory).
        var yawed = new Anchor("A", Vector3D.Zero, new Vector3D(90, 0, 0));
        var boresight = yawed.Rotation.Apply(new Vector3D(1, 0, 0));
        Assert.Equal(0, boresight.X, 12);
        Assert.Equal(1, boresight.Y, 12);

        var pitched = yawed with { OrientationDegrees = new Vector3D(0, 90, 0) };
        var down = pitched.Rotation.Apply(new Vector3D(1, 0, 0));
        Assert.Equal(-1, down.Z, 12);
        Assert.Equal(0, down.Y, 12);
    }
}
