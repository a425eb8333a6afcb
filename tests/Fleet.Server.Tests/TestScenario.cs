using Fleet.Contracts.V1;
using Google.Protobuf.WellKnownTypes;

namespace Fleet.Server.Tests;

/// <summary>
/// An invented test site: six anchors around a 20 m × 12 m hall at 3–8 m height, and noiseless TDOA values from the
/// closed form ddiff = |p − b| − |p − a| (DESIGN.md sign convention) for a static tag.
/// </summary>
internal static class TestScenario
{
    public const double StartSeconds = 1_700_000_000;

    public static readonly (string Id, double X, double Y, double Z)[] Anchors =
    [
        ("HP-A01", 0.0, 0.0, 3.0),
        ("HP-A02", 20.0, 0.0, 8.0),
        ("HP-A03", 20.0, 12.0, 3.5),
        ("HP-A04", 0.0, 12.0, 7.5),
        ("HP-A05", 10.0, -1.0, 6.0),
        ("HP-A06", 10.0, 13.0, 4.0),
    ];

    public static PutAnchorMapRequest AnchorMapRequest(string siteId)
    {
        var request = new PutAnchorMapRequest { SiteId = siteId };
        foreach (var (id, x, y, z) in Anchors)
        {
            request.Anchors.Add(new Anchor { AnchorId = id, Position = new Vector3 { X = x, Y = y, Z = z }, OrientationDeg = new Vector3() });
        }

        return request;
    }

    /// <summary>Distance difference |p − b| − |p − a| between anchors a and b (closed form).</summary>
    public static double DistanceDifference(int a, int b, (double X, double Y, double Z) p) => Distance(b, p) - Distance(a, p);

    /// <summary>
    /// <paramref name="count"/> TDOA samples at 50 Hz from <paramref name="startIndex"/>, cycling through every anchor
    /// pair, for a tag standing still at <paramref name="p"/>.
    /// </summary>
    public static RobotSamples StaticTagSamples(string robotId, (double X, double Y, double Z) p, int startIndex, int count)
    {
        var samples = new RobotSamples { RobotId = robotId };
        var pairs = new List<(int A, int B)>();
        for (var a = 0; a < Anchors.Length; a++)
        {
            for (var b = a + 1; b < Anchors.Length; b++)
            {
                pairs.Add((a, b));
            }
        }

        for (var k = startIndex; k < startIndex + count; k++)
        {
            var (a, b) = pairs[k % pairs.Count];
            samples.Tdoa.Add(new TdoaSample
            {
                SampleTime = Time(StartSeconds + (k * 0.02)),
                AnchorA = Anchors[a].Id,
                AnchorB = Anchors[b].Id,
                DistanceDifference = DistanceDifference(a, b, p),
            });
        }

        return samples;
    }

    public static Timestamp Time(double seconds)
    {
        var whole = Math.Floor(seconds);
        return new Timestamp { Seconds = (long)whole, Nanos = (int)Math.Round((seconds - whole) * 1e9) };
    }

    public static double Seconds(Timestamp t) => t.Seconds + (t.Nanos * 1e-9);

    private static double Distance(int anchor, (double X, double Y, double Z) p)
    {
        var (_, x, y, z) = Anchors[anchor];
        return Math.Sqrt(((p.X - x) * (p.X - x)) + ((p.Y - y) * (p.Y - y)) + ((p.Z - z) * (p.Z - z)));
    }
}
