namespace Fleet.Estimation.Measurements;

/// <summary>
/// One TDOA measurement as the filter sees it: anchors by dense index into the site's <see cref="Anchors.AnchorMap"/>.
/// <see cref="DistanceDifference"/> is |p − b| − |p − a| in metres (distance to B minus distance to A).
/// <see cref="Time"/> is seconds on the site clock.
/// </summary>
public readonly record struct TdoaMeasurement(double Time, int AnchorA, int AnchorB, double DistanceDifference);

/// <summary>Wheel odometry: forward speed (m/s) and yaw rate (rad/s) in the robot body frame at <see cref="Time"/> (s).</summary>
public readonly record struct OdometryMeasurement(double Time, double ForwardSpeed, double YawRate);
