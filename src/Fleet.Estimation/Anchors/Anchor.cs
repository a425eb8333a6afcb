using Fleet.Estimation.Geometry;

namespace Fleet.Estimation.Anchors;

/// <summary>
/// A fixed UWB anchor. Position in the site frame (metres, z up). Orientation as yaw, pitch, roll in degrees,
/// R = Rz(yaw)·Ry(pitch)·Rx(roll), taking anchor-body vectors to the site frame; body +x is the antenna boresight.
/// <see cref="AntennaDelayMetres"/> is a calibrated extra path length added by this anchor's hardware; it is
/// subtracted from each link's modelled distance.
/// </summary>
public sealed record Anchor(string Id, Vector3D Position, Vector3D OrientationDegrees, double AntennaDelayMetres = 0.0)
{
    /// <summary>Body → site rotation from <see cref="OrientationDegrees"/> (x = yaw, y = pitch, z = roll).</summary>
    public Rotation3D Rotation { get; } =
        Rotation3D.FromYawPitchRollDegrees(OrientationDegrees.X, OrientationDegrees.Y, OrientationDegrees.Z);
}
