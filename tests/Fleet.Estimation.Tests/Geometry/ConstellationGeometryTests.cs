using Fleet.Estimation.Geometry;
using MathNet.Numerics.LinearAlgebra;

namespace Fleet.Estimation.Tests.Geometry;

public class ConstellationGeometryTests
{
    // CHECKS.md §4 [C]: N anchors evenly on a circle, tag at the centre: HᵀH = (N/2)·I, so HDOP = 2/√N
    // (DOP definitions after Kaplan & Hegarty, Understanding GPS/GNSS, 3rd ed., from memory).
    [Theory]
    [InlineData(3)]
    [InlineData(4)]
    [InlineData(5)]
    [InlineData(6)]
    [InlineData(7)]
    [InlineData(8)]
    public void TdoaDop_CircleCentreKnownHeight_HdopIsTwoOverRootN(int n)
    {
        var anchors = Circle(n, radius: 10.0, height: 1.5, phase: 0.3);
        var dop = ConstellationGeometry.TdoaDop(anchors, new Vector3D(0, 0, 1.5), fixedHeight: 1.5);

        Assert.False(dop.IsSingular);
        Assert.Equal(2.0 / Math.Sqrt(n), dop.Horizontal, 1e-12);
        Assert.Equal(0.0, dop.Vertical, 1e-15);
        Assert.Equal(dop.Horizontal, dop.Position, 1e-15);
    }

    // CHECKS.md §4 table values for N = 3, 4, 6, 8 [C].
    [Theory]
    [InlineData(3, 1.154701)]
    [InlineData(4, 1.000000)]
    [InlineData(6, 0.816497)]
    [InlineData(8, 0.707107)]
    public void Map_CircleCentre_MatchesPublishedTable(int n, double expectedHdop)
    {
        var anchors = Circle(n, radius: 7.0, height: 0.0, phase: 0.0);
        var map = ConstellationGeometry.Map(anchors, -1, 1, -1, 1, 1.0, 0.0, GeometryMapQuantity.HorizontalDop, heightKnown: true);

        Assert.Equal(3, map.GetLength(0));
        Assert.Equal(3, map.GetLength(1));
        Assert.Equal(2.0 / Math.Sqrt(n), map[1, 1], 1e-12);
        Assert.Equal(expectedHdop, map[1, 1], 6);
    }

    // CHECKS.md §4 [C]: regular tetrahedron with clock: Σuᵢuᵢᵀ = (N/3)·I, Σuᵢ = 0 →
    // PDOP 1.5, HDOP 1.224745, VDOP 0.866025; TDOA DOP equals TOA+clock DOP (Shin & Sung 2002).
    [Fact]
    public void TdoaDop_RegularTetrahedronCentre_MatchesClosedForm()
    {
        var s = 8.0;
        Vector3D[] anchors =
        [
            new(s, s, s), new(s, -s, -s), new(-s, s, -s), new(-s, -s, s),
        ];

        var dop = ConstellationGeometry.TdoaDop(anchors, Vector3D.Zero);

        Assert.False(dop.IsSingular);
        Assert.Equal(1.5, dop.Position, 1e-12);
        Assert.Equal(Math.Sqrt(1.5), dop.Horizontal, 1e-12);
        Assert.Equal(1.224745, dop.Horizontal, 6);
        Assert.Equal(0.866025, dop.Vertical, 6);
    }

    // Shin & Sung (2002), IEEE Trans. AES 38(1) [V abstract]: TDOA with Q = σ²(I+11ᵀ) equals TOA with an
    // unknown clock column. Reference computed independently with MathNet as (HᵀH)⁻¹, H = [uᵢᵀ 1].
    [Fact]
    public void TdoaDop_RandomPoints_EqualsToaWithClockDop()
    {
        var random = new Random(20240611);
        for (var trial = 0; trial < 200; trial++)
        {
            var n = random.Next(4, 10);
            var anchors = new Vector3D[n];
            for (var i = 0; i < n; i++)
            {
                anchors[i] = new Vector3D(random.NextDouble() * 40, random.NextDouble() * 25, 1 + (random.NextDouble() * 9));
            }

            var p = new Vector3D(random.NextDouble() * 40, random.NextDouble() * 25, random.NextDouble() * 2);
            var reference = ToaClockCovariance(anchors, p, threeD: true);
            var dop = ConstellationGeometry.TdoaDop(anchors, p);

            Assert.False(dop.IsSingular);
            var hdop = Math.Sqrt(reference[0, 0] + reference[1, 1]);
            var vdop = Math.Sqrt(reference[2, 2]);
            Assert.Equal(hdop, dop.Horizontal, 1e-8 * Math.Max(1, hdop));
            Assert.Equal(vdop, dop.Vertical, 1e-8 * Math.Max(1, vdop));

            var reference2 = ToaClockCovariance(anchors, p, threeD: false);
            var dop2 = ConstellationGeometry.TdoaDop(anchors, p, fixedHeight: p.Z);
            Assert.Equal(Math.Sqrt(reference2[0, 0] + reference2[1, 1]), dop2.Horizontal, 1e-8 * Math.Max(1, dop2.Horizontal));
        }
    }

    // Reordering the anchors changes the reference anchor; the bound must not change (Shin & Sung 2002).
    [Fact]
    public void Crlb_ReferenceAnchorChoice_DoesNotMatter()
    {
        Vector3D[] anchors = [new(0, 0, 3), new(30, 2, 8), new(28, 20, 4), new(3, 22, 9), new(15, 12, 6)];
        var p = new Vector3D(11, 7, 0.5);
        var a = ConstellationGeometry.Crlb(anchors, p, 0.07);
        var b = ConstellationGeometry.Crlb([anchors[3], anchors[1], anchors[4], anchors[0], anchors[2]], p, 0.07);
        for (var i = 0; i < 9; i++)
        {
            Assert.Equal(a.Covariance[i], b.Covariance[i], 1e-12);
        }
    }

    // CHECKS.md §5 CRLB fixture [C]: anchors (0,0), (10,0), (10,10), (0,10), σ_TOA = 0.1 m, Q = σ²(I+11ᵀ):
    // at (5,5) the bound is diag(0.005, 0.005) m²; (Chan & Ho 1994 formulation).
    [Fact]
    public void Crlb_SquareCentre_MatchesFixture()
    {
        var bound = ConstellationGeometry.Crlb(Square(), new Vector3D(5, 5, 0), 0.1, fixedHeight: 0);

        Assert.Equal(2, bound.Dimension);
        Assert.Equal(0.005, bound[0, 0], 1e-12);
        Assert.Equal(0.005, bound[1, 1], 1e-12);
        Assert.Equal(0.0, bound[0, 1], 1e-12);
        Assert.Equal(0.1, bound.HorizontalRms, 1e-12);
    }

    // CHECKS.md §5 CRLB fixture [C]: at (3,4) → [[0.00555357, −0.00028432], [−0.00028432, 0.00478971]] m².
    [Fact]
    public void Crlb_SquareOffCentre_MatchesFixture()
    {
        var bound = ConstellationGeometry.Crlb(Square(), new Vector3D(3, 4, 0), 0.1, fixedHeight: 0);

        Assert.Equal(0.00555357, bound[0, 0], 8);
        Assert.Equal(-0.00028432, bound[0, 1], 8);
        Assert.Equal(-0.00028432, bound[1, 0], 8);
        Assert.Equal(0.00478971, bound[1, 1], 8);
    }

    [Fact]
    public void TdoaDop_CoplanarAnchorsThroughTag_IsSingular()
    {
        // All anchors and the tag in the plane z = 2: height is unobservable in 3-D.
        var dop = ConstellationGeometry.TdoaDop(Circle(6, 10, 2, 0), new Vector3D(1, 1, 2));
        Assert.True(dop.IsSingular);
        Assert.True(double.IsNaN(dop.Horizontal));
    }

    [Fact]
    public void TdoaDop_TooFewAnchors_IsSingular()
    {
        Vector3D[] anchors = [new(0, 0, 3), new(10, 0, 5), new(0, 10, 7)];
        Assert.True(ConstellationGeometry.TdoaDop(anchors, new Vector3D(3, 3, 0)).IsSingular);
    }

    [Fact]
    public void Map_GridShapeAndCoordinates_FollowStep()
    {
        Vector3D[] anchors = [new(0, 0, 3), new(40, 0, 8), new(40, 25, 4), new(0, 25, 9), new(20, 12, 6)];
        var map = ConstellationGeometry.Map(anchors, 0, 40, 0, 25, 5, 0.45, GeometryMapQuantity.HorizontalCrlbRms, sigmaToaMetres: 0.1);

        Assert.Equal(6, map.GetLength(0));
        Assert.Equal(9, map.GetLength(1));
        var direct = ConstellationGeometry.Crlb(anchors, new Vector3D(15, 10, 0.45), 0.1);
        Assert.Equal(direct.HorizontalRms, map[2, 3], 1e-12);
    }

    private static Vector3D[] Square() => [new(0, 0, 0), new(10, 0, 0), new(10, 10, 0), new(0, 10, 0)];

    private static Vector3D[] Circle(int n, double radius, double height, double phase)
    {
        var anchors = new Vector3D[n];
        for (var i = 0; i < n; i++)
        {
            var angle = phase + (2 * Math.PI * i / n);
            anchors[i] = new Vector3D(radius * Math.Cos(angle), radius * Math.Sin(angle), height);
        }

        return anchors;
    }

    private static Matrix<double> ToaClockCovariance(Vector3D[] anchors, Vector3D p, bool threeD)
    {
        var cols = threeD ? 4 : 3;
        var h = Matrix<double>.Build.Dense(anchors.Length, cols);
        for (var i = 0; i < anchors.Length; i++)
        {
            // With a known height the z column is simply left out (the line of sight keeps its 3-D unit length).
            var u = (p - anchors[i]).Normalized();
            h[i, 0] = u.X;
            h[i, 1] = u.Y;
            if (threeD)
            {
                h[i, 2] = u.Z;
            }

            h[i, cols - 1] = 1.0;
        }

        return (h.TransposeThisAndMultiply(h)).Inverse();
    }
}
