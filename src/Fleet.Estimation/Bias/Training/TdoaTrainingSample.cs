using Fleet.Estimation.Anchors;
using Fleet.Estimation.Geometry;

namespace Fleet.Estimation.Bias.Training;

/// <summary>
/// One TDOA measurement paired with ground truth, for bias-model training.
/// <see cref="Target"/> = measured ddiff − true ddiff (m), the bias the model should learn (plus noise and NLOS).
/// <see cref="Group"/> names the anchor layout (or site) the sample came from; validation holds out whole groups.
/// </summary>
/// <param name="Group">Layout/site key for grouped validation.</param>
/// <param name="Robot">Robot id (fallback grouping when only one layout is given).</param>
/// <param name="Time">Measurement time (s).</param>
/// <param name="Map">Anchor map of the layout the anchor indices refer to.</param>
/// <param name="AnchorA">Index of anchor a (ddiff = |p − b| − |p − a|).</param>
/// <param name="AnchorB">Index of anchor b.</param>
/// <param name="TagPosition">True tag position at <paramref name="Time"/> (site frame, m), interpolated.</param>
/// <param name="RobotYaw">True robot yaw (rad), interpolated along the shorter arc.</param>
/// <param name="MeasuredDistanceDifference">Measured ddiff (m).</param>
/// <param name="TrueDistanceDifference">Modelled ddiff at the true position including antenna delays (m).</param>
public readonly record struct TdoaTrainingSample(
    string Group,
    string Robot,
    double Time,
    AnchorMap Map,
    int AnchorA,
    int AnchorB,
    Vector3D TagPosition,
    double RobotYaw,
    double MeasuredDistanceDifference,
    double TrueDistanceDifference)
{
    /// <summary>Measured minus true ddiff (m): what a bias model should predict.</summary>
    public double Target => MeasuredDistanceDifference - TrueDistanceDifference;
}
