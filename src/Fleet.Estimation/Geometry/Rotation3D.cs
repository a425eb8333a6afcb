namespace Fleet.Estimation.Geometry;

/// <summary>
/// A 3×3 rotation matrix, row-major, taking body-frame vectors to the site frame.
/// Built from yaw, pitch, roll as R = Rz(yaw)·Ry(pitch)·Rx(roll) (intrinsic z-y′-x″), the site convention.
/// </summary>
public readonly record struct Rotation3D(
    double M11, double M12, double M13,
    double M21, double M22, double M23,
    double M31, double M32, double M33)
{
    public static Rotation3D Identity => new(1, 0, 0, 0, 1, 0, 0, 0, 1);

    /// <summary>R = Rz(yaw)·Ry(pitch)·Rx(roll), angles in radians.</summary>
    public static Rotation3D FromYawPitchRoll(double yaw, double pitch, double roll)
    {
        double cy = Math.Cos(yaw), sy = Math.Sin(yaw);
        double cp = Math.Cos(pitch), sp = Math.Sin(pitch);
        double cr = Math.Cos(roll), sr = Math.Sin(roll);
        return new Rotation3D(
            cy * cp, (cy * sp * sr) - (sy * cr), (cy * sp * cr) + (sy * sr),
            sy * cp, (sy * sp * sr) + (cy * cr), (sy * sp * cr) - (cy * sr),
            -sp, cp * sr, cp * cr);
    }

    /// <summary>Same as <see cref="FromYawPitchRoll"/> with angles in degrees.</summary>
    public static Rotation3D FromYawPitchRollDegrees(double yawDeg, double pitchDeg, double rollDeg) =>
        FromYawPitchRoll(yawDeg * Math.PI / 180.0, pitchDeg * Math.PI / 180.0, rollDeg * Math.PI / 180.0);

    /// <summary>Rotation about +z only (robot yaw).</summary>
    public static Rotation3D FromYaw(double yaw) => FromYawPitchRoll(yaw, 0, 0);

    /// <summary>Body → site: R·v.</summary>
    public Vector3D Apply(Vector3D v) => new(
        (M11 * v.X) + (M12 * v.Y) + (M13 * v.Z),
        (M21 * v.X) + (M22 * v.Y) + (M23 * v.Z),
        (M31 * v.X) + (M32 * v.Y) + (M33 * v.Z));

    /// <summary>Site → body: Rᵀ·v.</summary>
    public Vector3D ApplyInverse(Vector3D v) => new(
        (M11 * v.X) + (M21 * v.Y) + (M31 * v.Z),
        (M12 * v.X) + (M22 * v.Y) + (M32 * v.Z),
        (M13 * v.X) + (M23 * v.Y) + (M33 * v.Z));

    /// <summary>Body +x axis (boresight for an anchor) expressed in the site frame.</summary>
    public Vector3D XAxis => new(M11, M21, M31);

    /// <summary>Body +z axis (up axis) expressed in the site frame.</summary>
    public Vector3D ZAxis => new(M13, M23, M33);
}
