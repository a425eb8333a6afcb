using Fleet.Estimation.Bias;
using Fleet.Estimation.Geometry;

namespace Fleet.Estimation.Tests.Bias;

public class LinkFeaturesTests
{
    private const double Tolerance = 1e-6;

    [Fact]
    public void Write_AnchorYawed90TagAlongSiteY_TagOnBoresight()
    {
        // Closed form: R = Rz(90°) maps body +x to site +y, so a tag 5 m along site +y is on the boresight (1, 0, 0).
        var features = new float[LinkFeatures.Count];
        LinkFeatures.Write(Vector3D.Zero, Rotation3D.FromYawPitchRollDegrees(90, 0, 0), new Vector3D(0, 5, 0), 0.0, LinkFeatureSet.Full, features);

        Assert.Equal(5.0, features[0], Tolerance);
        Assert.Equal(1.0, features[1], Tolerance);
        Assert.Equal(0.0, features[2], Tolerance);
        Assert.Equal(0.0, features[3], Tolerance);

        // Robot yaw 0: the anchor lies along site −y, i.e. body (0, −1, 0).
        Assert.Equal(0.0, features[4], Tolerance);
        Assert.Equal(-1.0, features[5], Tolerance);
        Assert.Equal(0.0, features[6], Tolerance);
    }

    [Fact]
    public void Write_RobotYawed90_AnchorBehindRobot()
    {
        // Robot yaw +90° points body +x along site +y; an anchor at site −y from the tag is straight behind: (−1, 0, 0).
        var features = new float[LinkFeatures.Count];
        LinkFeatures.Write(Vector3D.Zero, Rotation3D.Identity, new Vector3D(0, 5, 0), Math.PI / 2, LinkFeatureSet.Full, features);

        Assert.Equal(-1.0, features[4], Tolerance);
        Assert.Equal(0.0, features[5], Tolerance);
        Assert.Equal(0.0, features[6], Tolerance);
    }

    [Fact]
    public void Write_WithoutAnchorOrientation_UsesSiteFrame()
    {
        var features = new float[LinkFeatures.Count];
        LinkFeatures.Write(Vector3D.Zero, Rotation3D.FromYawPitchRollDegrees(90, 20, 5), new Vector3D(0, 5, 0), 0.0,
            LinkFeatureSet.WithoutAnchorOrientation, features);

        Assert.Equal(0.0, features[1], Tolerance);
        Assert.Equal(1.0, features[2], Tolerance);
        Assert.Equal(0.0, features[3], Tolerance);
    }

    [Fact]
    public void Write_RandomPose_EqualsDirectionCosinesOfAzimuthElevation()
    {
        // Encoding check: (cos el·cos az, cos el·sin az, sin el) with az, el from RelativeDirection.Of (atan2 definitions).
        var random = new Random(3);
        var features = new float[LinkFeatures.Count];
        for (var k = 0; k < 100; k++)
        {
            var anchor = new Vector3D(random.NextDouble() * 30, random.NextDouble() * 20, 4);
            var rotation = Rotation3D.FromYawPitchRoll(random.NextDouble() * 6, random.NextDouble() - 0.5, random.NextDouble() - 0.5);
            var tag = new Vector3D(random.NextDouble() * 30, random.NextDouble() * 20, 0.5);
            var yaw = (random.NextDouble() * 6) - 3;
            LinkFeatures.Write(anchor, rotation, tag, yaw, LinkFeatureSet.Full, features);

            var tagInAnchor = RelativeDirection.Of(rotation.ApplyInverse(tag - anchor));
            var anchorInTag = RelativeDirection.Of(Rotation3D.FromYaw(yaw).ApplyInverse(anchor - tag));
            AssertDirection(tagInAnchor, features.AsSpan(1, 3));
            AssertDirection(anchorInTag, features.AsSpan(4, 3));
        }
    }

    [Fact]
    public void Write_CoincidentTagAndAnchor_ZeroNotNaN()
    {
        var features = new float[LinkFeatures.Count];
        LinkFeatures.Write(new Vector3D(1, 2, 3), Rotation3D.Identity, new Vector3D(1, 2, 3), 0.3, LinkFeatureSet.Full, features);
        foreach (var f in features)
        {
            Assert.Equal(0.0, f, Tolerance);
        }
    }

    private static void AssertDirection(RelativeDirection direction, ReadOnlySpan<float> cosines)
    {
        Assert.Equal(Math.Cos(direction.Elevation) * Math.Cos(direction.Azimuth), cosines[0], 1e-5);
        Assert.Equal(Math.Cos(direction.Elevation) * Math.Sin(direction.Azimuth), cosines[1], 1e-5);
        Assert.Equal(Math.Sin(direction.Elevation), cosines[2], 1e-5);
    }
}
