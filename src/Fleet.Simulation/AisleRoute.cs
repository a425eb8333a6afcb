using Fleet.Estimation.Geometry;

namespace Fleet.Simulation;

/// <summary>
/// A closed loop of waypoints (site frame, metres, z ignored) through the aisles and cross aisles of
/// <see cref="HarborPointHall"/>: a rectangle whose long sides follow two aisles and whose short sides follow two
/// cross aisles, with a pass-through waypoint at every intersection on the way.
/// </summary>
public sealed class AisleRoute
{
    public AisleRoute(IReadOnlyList<Vector3D> waypoints)
    {
        if (waypoints.Count < 2)
        {
            throw new ArgumentException("a route needs at least two waypoints", nameof(waypoints));
        }

        Waypoints = waypoints;
    }

    /// <summary>Waypoints in driving order; after the last one the robot drives back to the first.</summary>
    public IReadOnlyList<Vector3D> Waypoints { get; }

    /// <summary>A random rectangular loop drawn with <paramref name="random"/> (deterministic for a seeded generator).</summary>
    public static AisleRoute CreateRandom(Random random)
    {
        var aisles = HarborPointHall.AisleCentresY;
        var crosses = HarborPointHall.CrossAisleCentresX;

        // Route mix: a third of the robots shuttle in the open staging area, most run between the staging area
        // and one rack aisle, the rest between two rack aisles.
        var staging = HarborPointHall.StagingLaneCount;
        int i, j;
        var kind = random.NextDouble();
        if (kind < 0.35)
        {
            i = 0;
            j = 1;
        }
        else if (kind < 0.8)
        {
            i = random.Next(staging);
            j = staging + random.Next(aisles.Count - staging);
        }
        else
        {
            i = staging + random.Next(aisles.Count - staging);
            do
            {
                j = staging + random.Next(aisles.Count - staging);
            }
            while (j == i);
        }

        // Neighbouring cross aisles: loops of one rack block's length.
        var a = random.Next(crosses.Count - 1);
        var b = a + 1;

        var y1 = aisles[Math.Min(i, j)];
        var y2 = aisles[Math.Max(i, j)];
        var x1 = crosses[Math.Min(a, b)];
        var x2 = crosses[Math.Max(a, b)];

        // Counter-clockwise loop with every aisle/cross-aisle intersection on its sides as a waypoint.
        var loop = new List<Vector3D>();
        AddSide(loop, x1, y1, x2, y1);
        AddSide(loop, x2, y1, x2, y2);
        AddSide(loop, x2, y2, x1, y2);
        AddSide(loop, x1, y2, x1, y1);

        if (random.Next(2) == 1)
        {
            loop.Reverse();
        }

        // Start at a random waypoint.
        var start = random.Next(loop.Count);
        var ordered = new Vector3D[loop.Count];
        for (var k = 0; k < loop.Count; k++)
        {
            ordered[k] = loop[(start + k) % loop.Count];
        }

        return new AisleRoute(ordered);
    }

    // Adds (xa, ya) and the intersections strictly between it and (xb, yb), in driving order.
    private static void AddSide(List<Vector3D> loop, double xa, double ya, double xb, double yb)
    {
        loop.Add(new Vector3D(xa, ya, 0));
        var between = new List<Vector3D>();
        if (ya == yb)
        {
            foreach (var x in HarborPointHall.CrossAisleCentresX)
            {
                if (x > Math.Min(xa, xb) && x < Math.Max(xa, xb))
                {
                    between.Add(new Vector3D(x, ya, 0));
                }
            }
        }
        else
        {
            foreach (var y in HarborPointHall.AisleCentresY)
            {
                if (y > Math.Min(ya, yb) && y < Math.Max(ya, yb))
                {
                    between.Add(new Vector3D(xa, y, 0));
                }
            }
        }

        var from = new Vector3D(xa, ya, 0);
        between.Sort((p, q) => Vector3D.Distance(from, p).CompareTo(Vector3D.Distance(from, q)));
        loop.AddRange(between);
    }
}
