using Fleet.Estimation.Geometry;

namespace Fleet.Simulation;

/// <summary>
/// The storage hall of our fictional "Harbor Point DC": 40 m (x) × 25 m (y), floor at z = 0.
/// The front 7.5 m (y &lt; 7.5) is an open staging and dock area. Behind it stand four rows of single-depth pallet
/// racks (1.2 m deep, 6.5–8 m high) along x, each cut into three blocks by cross aisles at x = 13 and x = 27.
/// Drivable lanes: two staging lanes and four aisles along x, four cross aisles along y (both ends and the two cuts).
/// All values are invented but plausible.
/// </summary>
public static class HarborPointHall
{
    public const double Length = 40.0;
    public const double Width = 25.0;

    /// <summary>Rack depth (y extent), metres.</summary>
    public const double RackDepth = 1.2;

    /// <summary>Centre lines (y, metres) of the lanes that run along x: two in the open staging area, then the rack aisles.</summary>
    public static IReadOnlyList<double> AisleCentresY { get; } = [2.0, 5.0, 10.2, 14.4, 18.6, 23.1];

    /// <summary>The first this many entries of <see cref="AisleCentresY"/> are lanes of the open staging area.</summary>
    public const int StagingLaneCount = 2;

    /// <summary>Centre lines (x, metres) of the cross aisles that run along y.</summary>
    public static IReadOnlyList<double> CrossAisleCentresX { get; } = [2.0, 13.0, 27.0, 38.0];

    /// <summary>Rack boxes (site frame, metres).</summary>
    public static IReadOnlyList<AxisAlignedBox> Racks { get; } = BuildRacks();

    /// <summary>Floor extent: the hall's footprint at z = 0.</summary>
    public static AxisAlignedBox Floor { get; } = new(new Vector3D(0, 0, 0), new Vector3D(Length, Width, 0));

    private static AxisAlignedBox[] BuildRacks()
    {
        double[] heights = [6.5, 7.0, 8.0, 7.5];
        (double From, double To)[] blocks = [(4.0, 11.5), (14.5, 25.5), (28.5, 36.0)];
        var racks = new List<AxisAlignedBox>();
        for (var row = 0; row < heights.Length; row++)
        {
            var y0 = 7.5 + (4.2 * row);
            foreach (var (from, to) in blocks)
            {
                racks.Add(new AxisAlignedBox(new Vector3D(from, y0, 0), new Vector3D(to, y0 + RackDepth, heights[row])));
            }
        }

        return [.. racks];
    }
}
