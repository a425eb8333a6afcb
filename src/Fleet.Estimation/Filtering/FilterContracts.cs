using Fleet.Estimation.Geometry;

namespace Fleet.Estimation.Filtering;

/// <summary>Which process model a robot's filter runs.</summary>
public enum MotionModelKind
{
    /// <summary>3-D constant velocity with white-acceleration noise; state (x, y, z, vx, vy, vz). For TDOA-only tags.</summary>
    ConstantVelocity3D,

    /// <summary>Planar odometry-driven ground robot; state (x, y, z, yaw); inputs forward speed and yaw rate.</summary>
    PlanarOdometry,
}

/// <summary>Cost used by the measurement update.</summary>
public enum RobustKernel
{
    /// <summary>Plain least squares: every measurement at full weight (no gate unless configured). For comparison only.</summary>
    LeastSquares,
    Huber,
    Cauchy,
    Tukey,
}

/// <summary>What the filter did with one measurement.</summary>
public enum UpdateOutcome
{
    Accepted,
    DownWeighted,
    Rejected,

    /// <summary>Held for initialisation (the filter has no estimate yet).</summary>
    Buffered,

    /// <summary>Valid, but not used by the robot's motion model (odometry for a constant-velocity filter).</summary>
    Ignored,
}

/// <summary>Why a measurement was rejected (or <see cref="None"/>).</summary>
public enum RejectionReason
{
    None,
    NonFinite,
    UnknownAnchor,
    SameAnchor,
    TooLate,
    TooFarInFuture,
    ImpossibleValue,
    ChiSquareGate,
    ZeroWeight,
    NotInitialised,

    /// <summary>Same kind, time and anchors as a measurement the filter already holds (a re-sent batch): using it twice would double its information.</summary>
    Duplicate,
}

/// <summary>
/// Result of submitting one measurement. No allocation. <see cref="StandardizedInnovation"/> is the signed prior
/// innovation over its predicted sigma, (z − h(x⁻))/√S, for TDOAs that reached the update (NaN otherwise); its square
/// is <see cref="NormalizedInnovationSquared"/>.
/// </summary>
public readonly record struct UpdateResult(UpdateOutcome Outcome, RejectionReason Reason, double Weight, double NormalizedInnovationSquared, double StandardizedInnovation = double.NaN)
{
    public static UpdateResult Reject(RejectionReason reason) => new(UpdateOutcome.Rejected, reason, 0, double.NaN);
}

/// <summary>Coarse health of a robot's track.</summary>
public enum TrackingState
{
    /// <summary>Collecting measurements for a first fix.</summary>
    Acquiring,

    /// <summary>Converged and consistent.</summary>
    Locked,

    /// <summary>Running but with large uncertainty or many recent rejections.</summary>
    Uncertain,

    /// <summary>Diverged or starved of data; waiting to re-acquire.</summary>
    Lost,
}

/// <summary>
/// A pose estimate at <see cref="Time"/> (s). <see cref="Position"/> is the robot reference point and
/// <see cref="TagPosition"/> the tag (reference point + R(yaw)·lever arm), both in the site frame (m).
/// For a constant-velocity tag-only filter both are the tag. <see cref="Covariance"/> is 7×7 row-major over
/// (x, y, z, yaw, vx, vy, vz) of the reference point in the site frame (m, rad, m/s); entries a model does not
/// estimate are zero with the diagonal set to <see cref="PoseEstimate.UnobservedVariance"/>.
/// </summary>
public sealed class PoseEstimate
{
    public const int Dimension = 7;
    public const double UnobservedVariance = 1e6;

    public double Time { get; set; }
    public Vector3D Position { get; set; }
    public Vector3D TagPosition { get; set; }
    public double Yaw { get; set; }
    public Vector3D Velocity { get; set; }
    public double[] Covariance { get; } = new double[Dimension * Dimension];
    public TrackingState State { get; set; }

    /// <summary>Fraction of the recent measurements that were rejected (0–1).</summary>
    public double RecentRejectionRatio { get; set; }

    public double this[int row, int col] => Covariance[(row * Dimension) + col];
}
