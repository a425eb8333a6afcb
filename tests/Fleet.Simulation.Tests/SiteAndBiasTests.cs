using Fleet.Estimation.Anchors;
using Fleet.Estimation.Geometry;

namespace Fleet.Simulation.Tests;

public class WarehouseSitesTests
{
    [Fact]
    public void Build_AllNames_GiveValidLayoutsInsideHall()
    {
        Assert.True(WarehouseSites.Names.Count >= 4);
        foreach (var name in WarehouseSites.Names)
        {
            var layout = WarehouseSites.Build(name);
            Assert.Equal(name, layout.SiteId);
            Assert.NotNull(layout.Floor);
            Assert.InRange(layout.Anchors.Count, 8, 10);
            Assert.NotEmpty(layout.Racks);
            foreach (var anchor in layout.Anchors.Anchors)
            {
                Assert.Matches("^HP-[A-Z][0-9]{2}$", anchor.Id);
                Assert.InRange(anchor.Position.X, 0, HarborPointHall.Length);
                Assert.InRange(anchor.Position.Y, 0, HarborPointHall.Width);
                Assert.DoesNotContain(layout.Racks, r => r.Contains(anchor.Position));
            }
        }
    }

    [Fact]
    public void Build_HarborLow_WarnsSmallVerticalSpread()
    {
        var layout = WarehouseSites.Build(WarehouseSites.Low);
        var heights = layout.Anchors.Anchors.Select(a => a.Position.Z).ToList();
        Assert.True(heights.Max() - heights.Min() <= 3.0);
        Assert.Contains(layout.Anchors.Warnings, w => w.Code == AnchorMapIssueCode.SmallVerticalSpread);
    }

    [Fact]
    public void Build_HarborTall_HasLargeVerticalSpreadAndNoWarning()
    {
        var layout = WarehouseSites.Build(WarehouseSites.Tall);
        var heights = layout.Anchors.Anchors.Select(a => a.Position.Z).ToList();
        Assert.True(heights.Max() - heights.Min() >= 5.0);
        Assert.DoesNotContain(layout.Anchors.Warnings, w => w.Code == AnchorMapIssueCode.SmallVerticalSpread);
    }

    [Fact]
    public void Build_Layouts_DifferInPositionsAndOrientations()
    {
        var layouts = WarehouseSites.Names.Select(WarehouseSites.Build).ToList();
        for (var i = 0; i < layouts.Count; i++)
        {
            for (var j = i + 1; j < layouts.Count; j++)
            {
                var positionsI = layouts[i].Anchors.Anchors.Select(a => a.Position).ToHashSet();
                var orientationsI = layouts[i].Anchors.Anchors.Select(a => a.OrientationDegrees).ToHashSet();
                Assert.False(positionsI.SetEquals(layouts[j].Anchors.Anchors.Select(a => a.Position)));
                Assert.False(orientationsI.SetEquals(layouts[j].Anchors.Anchors.Select(a => a.OrientationDegrees)));
            }
        }

        // Ring and cross layouts use rolled mounts, which the bias sees through the anchor frame.
        Assert.Contains(WarehouseSites.Build(WarehouseSites.Ring).Anchors.Anchors, a => a.OrientationDegrees.Z != 0);
        Assert.Contains(WarehouseSites.Build(WarehouseSites.Cross).Anchors.Anchors, a => a.OrientationDegrees.Z != 0);
    }

    // Site convention (DESIGN.md): R = Rz(yaw)·Ry(pitch)·Rx(roll), body +x is the boresight.
    [Fact]
    public void AimAt_PointsBoresightAtTarget()
    {
        var from = new Vector3D(0.3, 0.3, 9.5);
        var target = new Vector3D(20, 12.5, 1.0);
        var o = WarehouseSites.AimAt(from, target);
        var boresight = Rotation3D.FromYawPitchRollDegrees(o.X, o.Y, o.Z).XAxis;
        var wanted = (target - from).Normalized();

        // Rounded to whole degrees: within 1°.
        Assert.True(Vector3D.Dot(boresight, wanted) > Math.Cos(Math.PI / 180));
        Assert.True(o.Y > 0, "pointing down is a positive pitch");
    }

    [Fact]
    public void Build_UnknownName_Throws() => Assert.Throws<ArgumentException>(() => WarehouseSites.Build("harbor-nowhere"));
}

public class LinkBiasFunctionTests
{
    [Fact]
    public void Evaluate_RandomPoses_BoundedByAmplitude()
    {
        var bias = new LinkBiasFunction(0.3);
        var random = new Random(7);
        var maxSeen = 0.0;
        foreach (var name in WarehouseSites.Names)
        {
            foreach (var anchor in WarehouseSites.Build(name).Anchors.Anchors)
            {
                for (var k = 0; k < 2000; k++)
                {
                    var tag = new Vector3D(random.NextDouble() * 40, random.NextDouble() * 25, random.NextDouble() * 2);
                    var value = bias.Evaluate(anchor, tag, (random.NextDouble() * 2 * Math.PI) - Math.PI);
                    Assert.True(Math.Abs(value) < 0.3);
                    maxSeen = Math.Max(maxSeen, Math.Abs(value));
                }
            }
        }

        // Not trivially small either: the bias is meant to reach a large part of its bound.
        Assert.True(maxSeen > 0.15, $"max |bias| {maxSeen}");
    }

    [Fact]
    public void Evaluate_SmallPoseSteps_ChangeSmoothly()
    {
        var bias = new LinkBiasFunction(0.3);
        var random = new Random(11);
        var anchors = WarehouseSites.Build(WarehouseSites.Ring).Anchors.Anchors;
        const double h = 1e-4;
        for (var k = 0; k < 5000; k++)
        {
            var anchor = anchors[k % anchors.Count];
            var tag = new Vector3D(random.NextDouble() * 40, random.NextDouble() * 25, 0.45);
            if (Vector3D.Distance(tag, anchor.Position) < 1.0)
            {
                continue;
            }

            var yaw = (random.NextDouble() * 2 * Math.PI) - Math.PI;
            var value = bias.Evaluate(anchor, tag, yaw);

            // Lipschitz-style bound: the score's gradient is at most a few per metre at ≥ 1 m and per radian.
            Assert.True(Math.Abs(bias.Evaluate(anchor, tag + new Vector3D(h, 0, 0), yaw) - value) < 10 * h);
            Assert.True(Math.Abs(bias.Evaluate(anchor, tag + new Vector3D(0, h, 0), yaw) - value) < 10 * h);
            Assert.True(Math.Abs(bias.Evaluate(anchor, tag, yaw + h) - value) < 10 * h);
        }

        // Yaw wraps without a jump.
        var a = anchors[0];
        var p = new Vector3D(20, 12, 0.45);
        Assert.Equal(bias.Evaluate(a, p, Math.PI - 1e-9), bias.Evaluate(a, p, -Math.PI + 1e-9), 1e-7);
    }

    [Fact]
    public void Evaluate_DependsOnRobotYawAndAnchorOrientation()
    {
        var bias = new LinkBiasFunction(0.3);
        var p = new Vector3D(20, 5, 0.45);
        var anchor = new Anchor("HP-T01", new Vector3D(2, 2, 6), new Vector3D(0, 20, 0));
        // A new instance, not `with`: Anchor computes Rotation once in its constructor.
        var rolled = new Anchor("HP-T01", new Vector3D(2, 2, 6), new Vector3D(0, 20, 90));

        Assert.True(Math.Abs(bias.Evaluate(anchor, p, 0) - bias.Evaluate(anchor, p, Math.PI / 2)) > 0.01);
        Assert.True(Math.Abs(bias.Evaluate(anchor, p, 0) - bias.Evaluate(rolled, p, 0)) > 0.01);
    }

    [Fact]
    public void EvaluateTdoa_IsLinkBMinusLinkA_AndMatchesBiasModelContract()
    {
        var bias = new LinkBiasFunction(0.3);
        var map = WarehouseSites.Build(WarehouseSites.Tall).Anchors;
        var p = new Vector3D(13, 10.2, 0.45);
        var expected = bias.Evaluate(map[3], p, 0.4) - bias.Evaluate(map[1], p, 0.4);
        Assert.Equal(expected, bias.EvaluateTdoa(map[1], map[3], p, 0.4), 1e-15);
        Assert.Equal(expected, bias.PredictTdoaBias(map, 1, 3, p, 0.4), 1e-15);
    }

    [Fact]
    public void Generate_TdoaBias_EqualsLinkBiasDifference()
    {
        var generator = new MeasurementGenerator(new SimulationOptions { DurationSeconds = 5 });
        var map = generator.Layout.Anchors;
        foreach (var item in generator.GenerateDetailed())
        {
            if (item.Record is Fleet.Estimation.Measurements.TdoaRecord tdoa)
            {
                var expected = generator.Bias.PredictTdoaBias(map, map.IndexOf(tdoa.AnchorA), map.IndexOf(tdoa.AnchorB), item.Tdoa!.TagPosition, item.Tdoa.Yaw);
                Assert.Equal(expected, item.Tdoa.BiasMetres, 1e-12);
            }
        }
    }

    [Fact]
    public void Evaluate_ZeroAmplitude_IsZero()
    {
        var anchor = WarehouseSites.Build(WarehouseSites.Tall).Anchors[0];
        Assert.Equal(0.0, new LinkBiasFunction(0).Evaluate(anchor, new Vector3D(5, 5, 0.45), 1.0));
    }
}
