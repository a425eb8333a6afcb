using Fleet.Estimation.Anchors;
using Fleet.Estimation.Filtering;
using Fleet.Estimation.Geometry;

namespace Fleet.Estimation.Tests.Filtering;

public class TagHeightPriorTests
{
    // Anchors within 0.4 m of one height: the vertical is barely observable (VDOP large), so without a height
    // constraint z wanders and, through the off-diagonal covariance, drags x and y (common practice: hold a
    // ground robot's tag height as a pseudo-measurement).
    private static AnchorMap FlatCeiling() => AnchorMap.Create("harbor-point-flat",
    [
        new Anchor("F1", new Vector3D(0, 0, 3.0), new Vector3D(45, 0, 0)),
        new Anchor("F2", new Vector3D(20, 0, 3.2), new Vector3D(135, 0, 0)),
        new Anchor("F3", new Vector3D(20, 15, 3.4), new Vector3D(-135, 0, 0)),
        new Anchor("F4", new Vector3D(0, 15, 3.1), new Vector3D(-45, 0, 0)),
        new Anchor("F5", new Vector3D(10, 7.5, 3.3), new Vector3D(0, 0, 0)),
        new Anchor("F6", new Vector3D(10, 0, 3.0), new Vector3D(90, 0, 0)),
    ]);

    private static (double Horizontal, double Vertical) Run(bool holdHeight)
    {
        var map = FlatCeiling();
        var lever = new Vector3D(0, 0, 0.8);
        var options = new FilterOptions
        {
            Motion = MotionModelKind.ConstantVelocity3D,
            TagLeverArm = lever,
            HoldTagHeight = holdHeight,
            TdoaSigmaMetres = 0.1,
        };
        var run = new SyntheticRun
        {
            Map = map,
            Truth = SyntheticRun.Circle(new Vector3D(10, 7.5, 0), 4, 1.0),
            Lever = lever,
            Duration = 40,
            OdometryRate = 0,
            Sigma = 0.1,
            Seed = 5,
        };
        var filter = new RobotFilter(map, options);
        var pose = new PoseEstimate();
        double h = 0, v = 0;
        var n = 0;
        foreach (var e in run.Generate())
        {
            SyntheticRun.Submit(filter, e);
            if (e.IsOdometry || filter.State == TrackingState.Acquiring || e.Time < run.StartTime + 5)
            {
                continue;
            }

            filter.GetPose(pose);
            var err = pose.TagPosition - e.TruthTag;
            h += (err.X * err.X) + (err.Y * err.Y);
            v += err.Z * err.Z;
            n++;
        }

        Assert.True(n > 100);
        return (Math.Sqrt(h / n), Math.Sqrt(v / n));
    }

    [Fact]
    public void HoldTagHeight_WeakVerticalGeometry_KeepsHeightAndDoesNotHurtHorizontal()
    {
        var held = Run(holdHeight: true);
        var free = Run(holdHeight: false);

        Assert.True(held.Vertical < 0.05, $"held vertical RMSE {held.Vertical}");
        Assert.True(held.Vertical < free.Vertical, $"held {held.Vertical} vs free {free.Vertical}");
        Assert.True(held.Horizontal <= free.Horizontal * 1.05, $"held {held.Horizontal} vs free {free.Horizontal}");
    }
}
