using Fleet.Estimation.Anchors;
using Fleet.Estimation.Geometry;

namespace Fleet.Estimation.Bias;

/// <summary>
/// Predicts the systematic bias (metres) of a TDOA value between anchors <paramref name="anchorA"/> and
/// <paramref name="anchorB"/> for a tag at <paramref name="tagPosition"/> on a robot with yaw <paramref name="robotYaw"/> (rad).
/// The corrected value is ddiff − bias. Implementations must not allocate: this runs once per measurement.
/// </summary>
public interface ITdoaBiasModel
{
    double PredictTdoaBias(AnchorMap map, int anchorA, int anchorB, in Vector3D tagPosition, double robotYaw);
}
