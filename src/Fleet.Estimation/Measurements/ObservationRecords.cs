using Fleet.Estimation.Filtering;
using Fleet.Estimation.Geometry;

namespace Fleet.Estimation.Measurements;

/// <summary>
/// One line of a measurement log or one item of a live ingest, with robots and anchors by id.
/// These are plain data: parsing and writing live in Fleet.Data, generation in Fleet.Simulation.
/// </summary>
public abstract record ObservationRecord(string Robot);

/// <summary>Declares a robot: its tag lever arm in the body frame (x forward, z up; metres) and its motion model.</summary>
public sealed record RobotRecord(string Robot, Vector3D TagOffset, MotionModelKind Motion = MotionModelKind.PlanarOdometry) : ObservationRecord(Robot);

/// <summary>A TDOA value ddiff = |p − b| − |p − a| (metres) at time <see cref="Time"/> (s).</summary>
public sealed record TdoaRecord(double Time, string Robot, string AnchorA, string AnchorB, double DistanceDifference) : ObservationRecord(Robot);

/// <summary>Wheel odometry: forward speed (m/s) and yaw rate (rad/s).</summary>
public sealed record OdometryRecord(double Time, string Robot, double ForwardSpeed, double YawRate) : ObservationRecord(Robot);

/// <summary>Ground truth: tag position in the site frame and robot yaw (rad). For training and evaluation only.</summary>
public sealed record TruthRecord(double Time, string Robot, Vector3D TagPosition, double Yaw) : ObservationRecord(Robot);
