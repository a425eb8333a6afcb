using Fleet.Estimation.Anchors;
using Fleet.Estimation.Geometry;

namespace Fleet.Simulation;

/// <summary>
/// Anchor layouts of the Harbor Point DC hall (<see cref="HarborPointHall"/>). Each layout places the anchors at
/// different positions and with different mounting orientations (yaw, pitch, roll in degrees, R = Rz·Ry·Rx, body +x
/// the boresight), so a bias model trained on some layouts can be checked on one it has not seen.
/// <list type="bullet">
/// <item><c>harbor-tall</c>: 10 anchors on the walls, at aisle ends and over a cross aisle, 2.6–9.8 m high, aimed at the hall centre.</item>
/// <item><c>harbor-low</c>: 8 wall anchors only 2.3–5.1 m high (weak vertical geometry: triggers the small-vertical-spread warning).</item>
/// <item><c>harbor-ring</c>: 8 anchors on columns in the aisles around the hall, aimed along the ring, some mounted on their side.</item>
/// <item><c>harbor-cross</c>: 8 anchors along two cross aisles and two aisles, aimed along the aisles, some mounted upside down.</item>
/// </list>
/// </summary>
public static class WarehouseSites
{
    public const string Tall = "harbor-tall";
    public const string Low = "harbor-low";
    public const string Ring = "harbor-ring";
    public const string Cross = "harbor-cross";

    /// <summary>Names accepted by <see cref="Build"/>.</summary>
    public static IReadOnlyList<string> Names { get; } = [Tall, Low, Ring, Cross];

    private static readonly Vector3D HallCentre = new(20.0, 12.5, 1.0);

    /// <summary>Builds the named layout (anchors validated, racks and floor of the hall attached).</summary>
    /// <exception cref="ArgumentException">Unknown name.</exception>
    public static SiteLayout Build(string name)
    {
        var anchors = name switch
        {
            Tall => TallAnchors(),
            Low => LowAnchors(),
            Ring => RingAnchors(),
            Cross => CrossAnchors(),
            _ => throw new ArgumentException($"unknown layout '{name}'; known layouts: {string.Join(", ", Names)}", nameof(name)),
        };
        return new SiteLayout(AnchorMap.Create(name, anchors), HarborPointHall.Racks, HarborPointHall.Floor);
    }

    /// <summary>
    /// Yaw and pitch (degrees, rounded to whole degrees as an installer would) that aim body +x from
    /// <paramref name="from"/> at <paramref name="target"/>, with the given roll.
    /// </summary>
    public static Vector3D AimAt(Vector3D from, Vector3D target, double rollDegrees = 0)
    {
        var d = target - from;
        var yaw = Math.Atan2(d.Y, d.X) * 180.0 / Math.PI;

        // Ry(pitch) takes +x to (cos p, 0, −sin p): a positive pitch tilts the boresight down.
        var pitch = Math.Atan2(-d.Z, d.HorizontalLength) * 180.0 / Math.PI;
        return new Vector3D(Math.Round(yaw), Math.Round(pitch), rollDegrees);
    }

    private static Anchor Aimed(string id, double x, double y, double z, Vector3D target, double roll = 0)
    {
        var p = new Vector3D(x, y, z);
        return new Anchor(id, p, AimAt(p, target, roll));
    }

    private static Anchor[] TallAnchors() =>
    [
        Aimed("HP-A01", 0.3, 0.3, 9.5, HallCentre),
        Aimed("HP-A02", 39.7, 0.3, 3.0, HallCentre),
        Aimed("HP-A03", 39.7, 24.7, 9.5, HallCentre),
        Aimed("HP-A04", 0.3, 24.7, 3.0, HallCentre),
        Aimed("HP-A05", 20.0, 0.3, 6.5, HallCentre),
        Aimed("HP-A06", 20.0, 24.7, 8.0, HallCentre),
        Aimed("HP-A07", 0.3, 14.4, 4.5, HallCentre),
        Aimed("HP-A08", 39.7, 10.2, 7.5, HallCentre),
        Aimed("HP-A09", 13.0, 18.6, 9.8, HallCentre),
        Aimed("HP-A10", 27.0, 5.0, 2.6, HallCentre),
    ];

    private static Anchor[] LowAnchors() =>
    [
        Aimed("HP-L01", 0.3, 0.3, 5.1, HallCentre),
        Aimed("HP-L02", 20.0, 0.3, 2.3, HallCentre),
        Aimed("HP-L03", 39.7, 0.3, 4.8, HallCentre),
        Aimed("HP-L04", 39.7, 14.4, 2.6, HallCentre),
        Aimed("HP-L05", 39.7, 24.7, 5.0, HallCentre),
        Aimed("HP-L06", 20.0, 24.7, 2.4, HallCentre),
        Aimed("HP-L07", 0.3, 24.7, 4.9, HallCentre),
        Aimed("HP-L08", 0.3, 10.2, 2.8, HallCentre),
    ];

    // Column-mounted in the aisles, boresight along the ring (counter-clockwise), tilted 20° down;
    // every other unit is mounted on its side (roll 90°).
    private static Anchor[] RingAnchors() =>
    [
        new("HP-R01", new Vector3D(38.0, 5.0, 5.5), new Vector3D(90, 20, 0)),
        new("HP-R02", new Vector3D(38.0, 18.6, 8.5), new Vector3D(135, 20, 90)),
        new("HP-R03", new Vector3D(27.0, 23.1, 4.0), new Vector3D(180, 20, 0)),
        new("HP-R04", new Vector3D(13.0, 23.1, 7.0), new Vector3D(-135, 20, 90)),
        new("HP-R05", new Vector3D(2.0, 18.6, 3.5), new Vector3D(-90, 20, 0)),
        new("HP-R06", new Vector3D(2.0, 5.0, 8.0), new Vector3D(-45, 20, 90)),
        new("HP-R07", new Vector3D(13.0, 2.0, 5.0), new Vector3D(0, 20, 0)),
        new("HP-R08", new Vector3D(27.0, 2.0, 9.0), new Vector3D(45, 20, 90)),
    ];

    // Along two cross aisles and two aisles, boresight along the aisle, tilted 30–45° down;
    // some hang upside down from the ceiling structure (roll 180°).
    private static Anchor[] CrossAnchors() =>
    [
        new("HP-X01", new Vector3D(27.0, 2.0, 9.0), new Vector3D(90, 45, 180)),
        new("HP-X02", new Vector3D(27.0, 10.2, 4.0), new Vector3D(90, 30, 0)),
        new("HP-X03", new Vector3D(13.0, 18.6, 5.0), new Vector3D(-90, 30, 0)),
        new("HP-X04", new Vector3D(13.0, 23.1, 9.5), new Vector3D(-90, 45, 180)),
        new("HP-X05", new Vector3D(2.0, 14.4, 6.0), new Vector3D(0, 30, 0)),
        new("HP-X06", new Vector3D(20.0, 14.4, 3.2), new Vector3D(0, 30, 180)),
        new("HP-X07", new Vector3D(30.0, 18.6, 8.5), new Vector3D(180, 45, 0)),
        new("HP-X08", new Vector3D(38.0, 10.2, 6.5), new Vector3D(180, 30, 180)),
    ];
}
