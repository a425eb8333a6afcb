namespace Fleet.Estimation.Geometry;

/// <summary>An axis-aligned box in the site frame (metres), e.g. a storage rack.</summary>
public readonly record struct AxisAlignedBox(Vector3D Min, Vector3D Max)
{
    public Vector3D Center => 0.5 * (Min + Max);

    public bool Contains(Vector3D p) =>
        p.X >= Min.X && p.X <= Max.X && p.Y >= Min.Y && p.Y <= Max.Y && p.Z >= Min.Z && p.Z <= Max.Z;

    /// <summary>
    /// Length (metres) of the part of segment <paramref name="from"/>→<paramref name="to"/> inside the box
    /// (slab method). Zero when the segment misses the box.
    /// </summary>
    public double SegmentLengthInside(Vector3D from, Vector3D to)
    {
        var d = to - from;
        double t0 = 0, t1 = 1;
        if (!Clip(from.X, d.X, Min.X, Max.X, ref t0, ref t1)
            || !Clip(from.Y, d.Y, Min.Y, Max.Y, ref t0, ref t1)
            || !Clip(from.Z, d.Z, Min.Z, Max.Z, ref t0, ref t1))
        {
            return 0;
        }

        return (t1 - t0) * d.Length;
    }

    private static bool Clip(double origin, double direction, double min, double max, ref double t0, ref double t1)
    {
        if (Math.Abs(direction) < 1e-15)
        {
            return origin >= min && origin <= max;
        }

        var ta = (min - origin) / direction;
        var tb = (max - origin) / direction;
        if (ta > tb)
        {
            (ta, tb) = (tb, ta);
        }

        t0 = Math.Max(t0, ta);
        t1 = Math.Min(t1, tb);
        return t0 < t1;
    }
}
