using System.Runtime.CompilerServices;

namespace Fleet.Estimation.Geometry;

/// <summary>A 3-vector of doubles in metres (or any unit the caller keeps consistent). Value type, no allocation.</summary>
public readonly record struct Vector3D(double X, double Y, double Z)
{
    public static Vector3D Zero => default;

    public double Length => Math.Sqrt((X * X) + (Y * Y) + (Z * Z));

    public double LengthSquared => (X * X) + (Y * Y) + (Z * Z);

    /// <summary>Horizontal (x–y) length.</summary>
    public double HorizontalLength => Math.Sqrt((X * X) + (Y * Y));

    public bool IsFinite => double.IsFinite(X) && double.IsFinite(Y) && double.IsFinite(Z);

    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static Vector3D operator +(Vector3D a, Vector3D b) => new(a.X + b.X, a.Y + b.Y, a.Z + b.Z);

    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static Vector3D operator -(Vector3D a, Vector3D b) => new(a.X - b.X, a.Y - b.Y, a.Z - b.Z);

    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static Vector3D operator -(Vector3D a) => new(-a.X, -a.Y, -a.Z);

    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static Vector3D operator *(double s, Vector3D a) => new(s * a.X, s * a.Y, s * a.Z);

    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static Vector3D operator *(Vector3D a, double s) => new(s * a.X, s * a.Y, s * a.Z);

    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static Vector3D operator /(Vector3D a, double s) => new(a.X / s, a.Y / s, a.Z / s);

    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static double Dot(Vector3D a, Vector3D b) => (a.X * b.X) + (a.Y * b.Y) + (a.Z * b.Z);

    public static Vector3D Cross(Vector3D a, Vector3D b) =>
        new((a.Y * b.Z) - (a.Z * b.Y), (a.Z * b.X) - (a.X * b.Z), (a.X * b.Y) - (a.Y * b.X));

    public static double Distance(Vector3D a, Vector3D b) => (a - b).Length;

    /// <summary>Unit vector; returns zero for a zero-length input instead of NaN.</summary>
    public Vector3D Normalized()
    {
        var length = Length;
        return length > 0 ? this / length : Zero;
    }

    public override string ToString() => FormattableString.Invariant($"({X:0.###}, {Y:0.###}, {Z:0.###})");
}
