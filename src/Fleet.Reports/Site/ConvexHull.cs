using Fleet.Reports.Rendering;

namespace Fleet.Reports.Site;

/// <summary>Plan-view convex hull (Andrew's monotone chain; common textbook algorithm) and point-in-hull tests.</summary>
public static class ConvexHull
{
    /// <summary>
    /// Hull vertices counter-clockwise without repeating the first, collinear points dropped. Fewer than three
    /// distinct non-collinear points give the distinct extreme points (a segment or a point), which contain nothing.
    /// </summary>
    public static IReadOnlyList<PlanPoint> Of(IEnumerable<PlanPoint> points)
    {
        var p = points.Where(q => double.IsFinite(q.X) && double.IsFinite(q.Y)).Distinct()
            .OrderBy(q => q.X).ThenBy(q => q.Y).ToArray();
        if (p.Length < 3)
        {
            return p;
        }

        var hull = new PlanPoint[2 * p.Length];
        var k = 0;
        for (var i = 0; i < p.Length; i++)
        {
            while (k >= 2 && Cross(hull[k - 2], hull[k - 1], p[i]) <= 0)
            {
                k--;
            }

            hull[k++] = p[i];
        }

        for (int i = p.Length - 2, lower = k + 1; i >= 0; i--)
        {
            while (k >= lower && Cross(hull[k - 2], hull[k - 1], p[i]) <= 0)
            {
                k--;
            }

            hull[k++] = p[i];
        }

        return hull[..(k - 1)];
    }

    /// <summary>
    /// True when <paramref name="point"/> is inside the counter-clockwise hull or within
    /// <paramref name="toleranceMetres"/> of its boundary. A hull of fewer than three vertices contains nothing.
    /// </summary>
    public static bool Contains(IReadOnlyList<PlanPoint> hull, PlanPoint point, double toleranceMetres = 1e-9)
    {
        if (hull.Count < 3)
        {
            return false;
        }

        for (var i = 0; i < hull.Count; i++)
        {
            var a = hull[i];
            var b = hull[(i + 1) % hull.Count];
            var length = Math.Sqrt(((b.X - a.X) * (b.X - a.X)) + ((b.Y - a.Y) * (b.Y - a.Y)));

            // Signed distance to the left of edge a→b; negative means outside for a counter-clockwise hull.
            if (Cross(a, b, point) / length < -toleranceMetres)
            {
                return false;
            }
        }

        return true;
    }

    private static double Cross(PlanPoint o, PlanPoint a, PlanPoint b) => ((a.X - o.X) * (b.Y - o.Y)) - ((a.Y - o.Y) * (b.X - o.X));
}
