using System.Runtime.CompilerServices;
using Fleet.Estimation.Anchors;
using Fleet.Estimation.Geometry;

namespace Fleet.Estimation.Filtering;

/// <summary>
/// The TDOA measurement function and its analytic Jacobians. Allocation-free.
/// Modelled distance to anchor i is |p − aᵢ| + δᵢ with δᵢ = <see cref="Anchor.AntennaDelayMetres"/>, so the
/// predicted value is ddiff = (|p − b| + δ_b) − (|p − a| + δ_a) in metres (site convention: distance to B minus distance to A).
/// Tag position p: for <see cref="MotionModelKind.PlanarOdometry"/> p = (x, y, z) + Rz(yaw)·leverArm with state
/// (x, y, z, yaw) of the robot reference point; for <see cref="MotionModelKind.ConstantVelocity3D"/> the state
/// position (x, y, z) is the tag itself and the lever arm is ignored.
/// </summary>
public static class TdoaMeasurementModel
{
    /// <summary>Below this distance (m) the unit vector to an anchor is undefined and taken as zero (no NaN).</summary>
    public const double MinimumDistanceMetres = 1e-9;

    /// <summary>State dimension of a motion model: 6 for constant velocity, 4 for planar odometry.</summary>
    public static int StateDimension(MotionModelKind kind) => kind == MotionModelKind.ConstantVelocity3D
        ? ConstantVelocityModel.StateDimension
        : PlanarOdometryModel.StateDimension;

    /// <summary>Predicted ddiff (m) for a tag at <paramref name="tag"/>, anchors at <paramref name="anchorA"/>, <paramref name="anchorB"/>.</summary>
    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static double Predict(in Vector3D tag, in Vector3D anchorA, double delayA, in Vector3D anchorB, double delayB) =>
        ((tag - anchorB).Length + delayB) - ((tag - anchorA).Length + delayA);

    /// <summary>Predicted ddiff (m) and its gradient with respect to the tag position (unitless, site frame).</summary>
    [MethodImpl(MethodImplOptions.AggressiveOptimization)]
    public static double PredictWithGradient(in Vector3D tag, in Vector3D anchorA, double delayA, in Vector3D anchorB, double delayB, out Vector3D gradient)
    {
        var da = tag - anchorA;
        var db = tag - anchorB;
        var la = da.Length;
        var lb = db.Length;
        var ua = la > MinimumDistanceMetres ? da / la : Vector3D.Zero;
        var ub = lb > MinimumDistanceMetres ? db / lb : Vector3D.Zero;
        gradient = ub - ua;
        return (lb + delayB) - (la + delayA);
    }

    /// <summary>Tag position in the site frame: reference + Rz(yaw)·leverArm (lever arm in the body frame, x forward, z up).</summary>
    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static Vector3D TagPosition(in Vector3D reference, double yaw, in Vector3D leverArm)
    {
        double c = Math.Cos(yaw), s = Math.Sin(yaw);
        return new Vector3D(
            reference.X + (c * leverArm.X) - (s * leverArm.Y),
            reference.Y + (s * leverArm.X) + (c * leverArm.Y),
            reference.Z + leverArm.Z);
    }

    /// <summary>Tag position for a state vector of the given motion model.</summary>
    public static Vector3D TagPosition(MotionModelKind kind, ReadOnlySpan<double> state, in Vector3D leverArm) =>
        kind == MotionModelKind.ConstantVelocity3D
            ? new Vector3D(state[0], state[1], state[2])
            : TagPosition(new Vector3D(state[0], state[1], state[2]), state[3], leverArm);

    /// <summary>
    /// Predicted ddiff (m) for anchors <paramref name="anchorA"/>, <paramref name="anchorB"/> of <paramref name="map"/>
    /// and the state of motion model <paramref name="kind"/>; writes ∂h/∂state into <paramref name="jacobian"/>
    /// (length ≥ state dimension). Planar: ∂h/∂yaw = ∇h · ∂(Rz(yaw)·leverArm)/∂yaw. Constant velocity: zeros for the velocities.
    /// </summary>
    [MethodImpl(MethodImplOptions.AggressiveOptimization)]
    public static double Evaluate(
        MotionModelKind kind,
        ReadOnlySpan<double> state,
        in Vector3D leverArm,
        AnchorMap map,
        int anchorA,
        int anchorB,
        Span<double> jacobian)
    {
        var a = map[anchorA];
        var b = map[anchorB];
        if (kind == MotionModelKind.ConstantVelocity3D)
        {
            var tag = new Vector3D(state[0], state[1], state[2]);
            var value = PredictWithGradient(tag, a.Position, a.AntennaDelayMetres, b.Position, b.AntennaDelayMetres, out var g);
            jacobian[0] = g.X;
            jacobian[1] = g.Y;
            jacobian[2] = g.Z;
            jacobian[3] = 0;
            jacobian[4] = 0;
            jacobian[5] = 0;
            return value;
        }
        else
        {
            var yaw = state[3];
            double c = Math.Cos(yaw), s = Math.Sin(yaw);
            var tag = new Vector3D(
                state[0] + (c * leverArm.X) - (s * leverArm.Y),
                state[1] + (s * leverArm.X) + (c * leverArm.Y),
                state[2] + leverArm.Z);
            var value = PredictWithGradient(tag, a.Position, a.AntennaDelayMetres, b.Position, b.AntennaDelayMetres, out var g);
            jacobian[0] = g.X;
            jacobian[1] = g.Y;
            jacobian[2] = g.Z;

            // d(Rz(yaw)·L)/dyaw = (−s·Lx − c·Ly, c·Lx − s·Ly, 0)
            jacobian[3] = (g.X * ((-s * leverArm.X) - (c * leverArm.Y))) + (g.Y * ((c * leverArm.X) - (s * leverArm.Y)));
            return value;
        }
    }

    /// <summary>
    /// Largest |ddiff| (m) physically possible for a pair: the anchor baseline |a − b| plus the difference of the
    /// antenna delays (triangle inequality).
    /// </summary>
    public static double MaximumMagnitude(Anchor a, Anchor b) =>
        (a.Position - b.Position).Length + Math.Abs(b.AntennaDelayMetres - a.AntennaDelayMetres);
}
