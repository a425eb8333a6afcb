using Fleet.Estimation.Anchors;
using Fleet.Estimation.Geometry;
using Fleet.Reports.Rendering;
using Fleet.Reports.Site;

namespace Fleet.Reports.Tests;

public class SiteGeometryAnalysisTests
{
    // CHECKS.md §4: N anchors evenly spaced on a circle, tag at the centre: HᵀH = (N/2)·I, so HDOP = 2/√N
    // (derived closed form; N = 3: 1.154701, 4: 1.000000, 6: 0.816497, 8: 0.707107). Anchors at the tag height
    // make the 3-D geometry planar, so the height-known map is the 2-D case of the table.
    [Theory]
    [InlineData(3)]
    [InlineData(4)]
    [InlineData(5)]
    [InlineData(6)]
    [InlineData(7)]
    [InlineData(8)]
    public void HdopMap_CentreOfCircleOfN_IsTwoOverRootN(int n)
    {
        // Arrange: cells of 1 m centred on integers from −5 to 5, so one cell centre is the circle centre.
        var layout = TestLayouts.Circle(n, 10, 0.5, TestLayouts.Floor(-5.5, -5.5, 5.5, 5.5));
        var options = new SiteGeometryOptions { TagHeights = [0.5], GridStepMetres = 1.0 };

        // Act
        var height = SiteGeometryAnalysis.Analyse(layout, options).Heights[0];

        // Assert
        Assert.Equal(2 / Math.Sqrt(n), height.ValueAt(height.HdopKnownHeight, 0, 0), 12);
        Assert.Equal(0.1 * 2 / Math.Sqrt(n), height.ValueAt(height.CrlbHorizontalKnownHeight, 0, 0), 12);
        Assert.Equal(n, height.ValueAt(ToDouble(height.UsableAnchors), 0, 0), 12);
    }

    [Fact]
    public void HdopMap_RenderedReport_ShowsTheCentreValue()
    {
        // The number a reader hovers over is the model's number: the centre cell of the 4-anchor circle reads HDOP 1.000.
        var layout = TestLayouts.Circle(4, 10, 0.5, TestLayouts.Floor(-5.5, -5.5, 5.5, 5.5));
        var geometry = SiteGeometryAnalysis.Analyse(layout, new SiteGeometryOptions());

        var html = SiteReport.Render(new SiteReportInput(geometry, "circle.json"));

        Assert.Contains("x 0.0 m, y 0.0 m: HDOP 1.000 (4 anchors usable)", html);
    }

    // CHECKS.md §5 CRLB fixture [C]: anchors (0,0), (10,0), (10,10), (0,10) m, σ_TOA = 0.1 m, Q = σ²(I + 11ᵀ):
    // at (5,5) the covariance is diag(0.005, 0.005) m²; at (3,4) [[0.00555357, −0.00028432], [−0.00028432, 0.00478971]].
    [Theory]
    [InlineData(5.0, 5.0, 0.005 + 0.005)]
    [InlineData(3.0, 4.0, 0.00555357 + 0.00478971)]
    public void CrlbMap_SquareFixture_MatchesTheRecomputedBound(double x, double y, double trace)
    {
        var layout = TestLayouts.Square(10, 0.5, TestLayouts.Floor(0.5, 0.5, 10.5, 10.5));
        var height = SiteGeometryAnalysis.Analyse(layout, new SiteGeometryOptions { SigmaToaMetres = 0.1 }).Heights[0];

        Assert.Equal(Math.Sqrt(trace), height.ValueAt(height.CrlbHorizontalKnownHeight, x, y), 7);
    }

    [Fact]
    public void ConvexHull_SquareWithInteriorAndEdgePoints_IsTheFourCornersCounterClockwise()
    {
        var hull = ConvexHull.Of([new(0, 0), new(5, 0), new(10, 0), new(5, 5), new(10, 10), new(0, 10), new(0, 10)]);

        // Hand-computed: the square's corners, counter-clockwise from the lowest-left point; (5,0) is on an edge and dropped.
        Assert.Equal([new PlanPoint(0, 0), new PlanPoint(10, 0), new PlanPoint(10, 10), new PlanPoint(0, 10)], hull);
    }

    [Theory]
    [InlineData(5, 5, true)]
    [InlineData(10, 5, true)]
    [InlineData(0, 0, true)]
    [InlineData(10.01, 5, false)]
    [InlineData(-0.5, 5, false)]
    [InlineData(11, 11, false)]
    [InlineData(5, -0.001, false)]
    public void ConvexHull_Contains_SquareCases(double x, double y, bool inside)
    {
        var hull = ConvexHull.Of([new(0, 0), new(10, 0), new(10, 10), new(0, 10)]);

        Assert.Equal(inside, ConvexHull.Contains(hull, new PlanPoint(x, y), 1e-6));
    }

    [Fact]
    public void EdgeClassification_SquareConstellationOnLargerFloor_CountsTheCellsOutside()
    {
        // Floor [−2, 12]² in 1 m cells: centres −1.5 … 11.5 (14 per axis, 196 cells). Centres 0.5 … 9.5 (10 per axis)
        // lie inside the anchors' square [0, 10]², so 196 − 100 = 96 cells are outside the hull (hand count).
        var layout = TestLayouts.Square(10, 3, TestLayouts.Floor(-2, -2, 12, 12));
        var geometry = SiteGeometryAnalysis.Analyse(layout, new SiteGeometryOptions { HdopLimit = 1e9 });
        var height = geometry.Heights[0];

        Assert.Equal(96, height.OutsideHullCells);
        Assert.Equal(CoverageClass.OutsideHull, height.Coverage[0, 0]);
        Assert.Equal(CoverageClass.Covered, height.Coverage[7, 7]);
        Assert.Contains(geometry.Findings, f => f.Code == "ConstellationEdge" && f.Severity == "warning");
    }

    [Fact]
    public void CoverageHoles_FloorBeyondRange_AreFoundWhereFewerThanFourAnchorsReach()
    {
        // Arrange: anchors at the corners of [0, 10]² at 3 m, floor [0, 20] × [0, 10], range 12.5 m, tag at 0.5 m.
        // An anchor (ax, ay, 3) is in range of (x, y, 0.5) when (x−ax)² + (y−ay)² + 2.5² ≤ 12.5², i.e. ≤ 150 m² in plan.
        var layout = TestLayouts.Square(10, 3, TestLayouts.Floor(0, 0, 20, 10));
        var options = new SiteGeometryOptions { MaxRangeMetres = 12.5, HdopLimit = 1e9 };

        // Act
        var height = SiteGeometryAnalysis.Analyse(layout, options).Heights[0];

        // Assert: every cell is a hole exactly when the hand count of anchors in range is below 4.
        var corners = new[] { (0.0, 0.0), (10.0, 0.0), (10.0, 10.0), (0.0, 10.0) };
        var expectedHoleCells = 0;
        for (var iy = 0; iy < height.Frame.Ny; iy++)
        {
            for (var ix = 0; ix < height.Frame.Nx; ix++)
            {
                double x = height.Frame.X(ix), y = height.Frame.Y(iy);
                var inRange = corners.Count(c => ((x - c.Item1) * (x - c.Item1)) + ((y - c.Item2) * (y - c.Item2)) <= 150);
                var isHole = height.Coverage[iy, ix] is CoverageClass.FewAnchors or CoverageClass.NoFix;
                Assert.True((inRange < 4) == isHole, $"cell ({x}, {y}): {inRange} anchors in range, class {height.Coverage[iy, ix]}");
                expectedHoleCells += inRange < 4 ? 1 : 0;
            }
        }

        Assert.True(expectedHoleCells > 50);
        Assert.Equal(expectedHoleCells, height.Holes.Sum(h => h.Cells));
        Assert.Equal(expectedHoleCells, height.HoleCells);
        Assert.Equal(20, height.Holes[0].Bounds.XMax, 9);
        Assert.Equal(CoverageClass.Covered, height.Coverage[5, 5]);
    }

    [Fact]
    public void UsableAnchors_RackBetweenTagAndAnchor_BlocksOnlyBeyondTheTolerance()
    {
        // A 1 m deep rack, 8 m tall, between the tag at (5, 5) and anchor HP-A02 at (10, 0): the line crosses
        // about 1.41 m of rack at 45° in plan (slightly more in 3-D).
        var rack = new AxisAlignedBox(new Vector3D(7, 1.5, 0), new Vector3D(8, 3.5, 8));
        var layout = TestLayouts.Square(10, 3, TestLayouts.Floor(0, 0, 10, 10), [rack]);
        var tag = new Vector3D(5, 5, 0.5);

        var strict = SiteGeometryAnalysis.UsableAnchors(layout, new SiteGeometryOptions { RackPathToleranceMetres = 0 }, tag);
        var lenient = SiteGeometryAnalysis.UsableAnchors(layout, new SiteGeometryOptions { RackPathToleranceMetres = 2 }, tag);

        Assert.Equal([0, 2, 3], strict);
        Assert.Equal([0, 1, 2, 3], lenient);
    }

    [Fact]
    public void AnchorAim_BoresightTurnedToTheWall_IsWarned()
    {
        var layout = TestLayouts.Square(10, 3, TestLayouts.Floor(0, 0, 10, 10));
        var anchors = layout.Anchors.Anchors.Select(a => a.Id == "HP-A02" ? a with { OrientationDegrees = new Vector3D(-45, 0, 0) } : a);
        layout = layout with { Anchors = AnchorMap.Create("square", anchors) };

        var geometry = SiteGeometryAnalysis.Analyse(layout, new SiteGeometryOptions());

        // HP-A02 at (10, 0, 3) yawed to −45° points along (1, −1, 0)/√2, away from the floor centre: the direction to
        // (5, 5, 0.5) is (−5, 5, −2.5), so cos θ = −7.0711 / 7.5 and θ = 160.5° (hand computation).
        var aim = geometry.Aims.Single(a => a.AnchorId == "HP-A02");
        Assert.True(aim.PointsAway);
        Assert.Equal(Math.Acos(-Math.Sqrt(50) / 7.5) * 180 / Math.PI, aim.AngleToFloorCentreDegrees, 9);
        Assert.Contains(geometry.Findings, f => f.Code == "BoresightAway" && f.Message.Contains("HP-A02", StringComparison.Ordinal));
        Assert.False(geometry.Aims.Single(a => a.AnchorId == "HP-A01").PointsAway);
    }

    private static double[,] ToDouble(int[,] values)
    {
        var result = new double[values.GetLength(0), values.GetLength(1)];
        for (var i = 0; i < values.GetLength(0); i++)
        {
            for (var j = 0; j < values.GetLength(1); j++)
            {
                result[i, j] = values[i, j];
            }
        }

        return result;
    }
}
