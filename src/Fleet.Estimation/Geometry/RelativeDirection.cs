namespace Fleet.Estimation.Geometry;

/// <summary>Azimuth and elevation of a direction expressed in some body frame (x forward, z up), radians.</summary>
public readonly record struct RelativeDirection(double Azimuth, double Elevation)
{
    /// <summary>
    /// Azimuth = atan2(y, x) in (−π, π], elevation = atan2(z, √(x²+y²)) in [−π/2, π/2].
    /// A zero vector gives (0, 0).
    /// </summary>
    public static RelativeDirection Of(Vector3D bodyVector) =>
        new(Math.Atan2(bodyVector.Y, bodyVector.X), Math.Atan2(bodyVector.Z, bodyVector.HorizontalLength));
}
