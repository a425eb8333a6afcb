using Fleet.Estimation.Geometry;

namespace Fleet.Estimation.Anchors;

/// <summary>
/// A fixed UWB anchor. Position in the site frame (metres, z up). Orientation as yaw, pitch, roll in degrees,
/// R = Rz(yaw)·Ry(pitch)·Rx(roll), taking anchor-body vectors to the site frame; body +x is the antenna boresight.
/// <see cref="AntennaDelayMetres"/> is a calibrated extra path length of this anchor's hardware: a link's
/// measured distance is |p − a| + delay, so the delay is added to the modelled distance of each link.
/// </summary>
public sealed record Anchor
{
    private readonly Vector3D _orientationDegrees;

    public Anchor(string id, Vector3D position, Vector3D orientationDegrees, double antennaDelayMetres = 0.0)
    {
        Id = id;
        Position = position;
        OrientationDegrees = orientationDegrees;
        AntennaDelayMetres = antennaDelayMetres;
    }

    public string Id { get; init; }

    public Vector3D Position { get; init; }

    /// <summary>(yaw, pitch, roll) in degrees. Setting it (also through <c>with</c>) recomputes <see cref="Rotation"/>.</summary>
    public Vector3D OrientationDegrees
    {
        get => _orientationDegrees;
        init
        {
            _orientationDegrees = value;
            Rotation = Rotation3D.FromYawPitchRollDegrees(value.X, value.Y, value.Z);
        }
    }

    public double AntennaDelayMetres { get; init; }

    /// <summary>Body → site rotation from <see cref="OrientationDegrees"/>, cached because it is used per measurement.</summary>
    public Rotation3D Rotation { get; private init; }
}
