using Fleet.Estimation.Geometry;

namespace Fleet.Simulation;

/// <summary>Planar kinematic state of a robot's reference point (site frame): position (m, z = 0), yaw (rad, in (−π, π]), forward speed (m/s), yaw rate (rad/s).</summary>
public readonly record struct RobotState(double Time, double X, double Y, double Yaw, double Speed, double YawRate)
{
    public Vector3D Position => new(X, Y, 0);

    /// <summary>Tag position in the site frame for a lever arm in the body frame (x forward, z up).</summary>
    public Vector3D TagPosition(Vector3D leverArm) => Position + Rotation3D.FromYaw(Yaw).Apply(leverArm);
}

/// <summary>Limits of the driving behaviour.</summary>
public sealed record DrivingProfile(
    double CruiseSpeed = 1.2,
    double Acceleration = 0.5,
    double Deceleration = 0.8,
    double CornerSpeed = 0.3,
    double MaxYawRate = 0.8,
    double YawAcceleration = 2.0,
    double DwellProbability = 0.25,
    double MinDwellSeconds = 1.0,
    double MaxDwellSeconds = 4.0);

/// <summary>
/// Drives a unicycle robot around an <see cref="AisleRoute"/>: accelerates to cruise speed, decelerates into each
/// corner, turns with a bounded yaw rate and sometimes stops at a waypoint (picking). Integrated with a fixed 10 ms
/// step and queried forward in time only (constant memory for any duration); states between steps are interpolated
/// linearly. Deterministic for a seeded <see cref="Random"/>.
/// </summary>
public sealed class RobotDriver
{
    /// <summary>Integration step (s).</summary>
    public const double StepSeconds = 0.01;

    private const double ArrivalRadius = 0.25;
    private const double TurnInPlaceAngle = 0.35;

    private readonly AisleRoute _route;
    private readonly DrivingProfile _profile;
    private readonly Random _random;
    private RobotState _previous;
    private RobotState _current;
    private int _target;
    private double _dwellRemaining;

    public RobotDriver(AisleRoute route, DrivingProfile profile, Random random)
    {
        _route = route;
        _profile = profile;
        _random = random;
        var start = route.Waypoints[0];
        var next = route.Waypoints[1];
        var yaw = Math.Atan2(next.Y - start.Y, next.X - start.X);
        _current = new RobotState(0, start.X, start.Y, yaw, 0, 0);
        _previous = _current;
        _target = 1;
    }

    /// <summary>State at time <paramref name="time"/> (s, ≥ 0). Times must not decrease between calls beyond one step.</summary>
    public RobotState StateAt(double time)
    {
        if (time < _previous.Time - 1e-12)
        {
            throw new InvalidOperationException("robot driver is queried forward in time only");
        }

        while (_current.Time < time)
        {
            _previous = _current;
            _current = Step(_current);
        }

        var span = _current.Time - _previous.Time;
        if (span <= 0)
        {
            return _current;
        }

        var f = (time - _previous.Time) / span;
        var yaw = WrapAngle(_previous.Yaw + (f * WrapAngle(_current.Yaw - _previous.Yaw)));
        return new RobotState(
            time,
            _previous.X + (f * (_current.X - _previous.X)),
            _previous.Y + (f * (_current.Y - _previous.Y)),
            yaw,
            _previous.Speed + (f * (_current.Speed - _previous.Speed)),
            _previous.YawRate + (f * (_current.YawRate - _previous.YawRate)));
    }

    /// <summary>Wraps an angle to (−π, π].</summary>
    public static double WrapAngle(double angle)
    {
        var a = Math.IEEERemainder(angle, 2 * Math.PI);
        return a <= -Math.PI ? a + (2 * Math.PI) : a;
    }

    private RobotState Step(RobotState s)
    {
        const double dt = StepSeconds;
        var p = _profile;
        var goal = _route.Waypoints[_target];
        var dx = goal.X - s.X;
        var dy = goal.Y - s.Y;
        var distance = Math.Sqrt((dx * dx) + (dy * dy));

        if (distance < ArrivalRadius && _dwellRemaining <= 0)
        {
            _target = (_target + 1) % _route.Waypoints.Count;
            if (_random.NextDouble() < p.DwellProbability)
            {
                _dwellRemaining = p.MinDwellSeconds + (_random.NextDouble() * (p.MaxDwellSeconds - p.MinDwellSeconds));
            }

            goal = _route.Waypoints[_target];
            dx = goal.X - s.X;
            dy = goal.Y - s.Y;
            distance = Math.Sqrt((dx * dx) + (dy * dy));
        }

        var headingError = WrapAngle(Math.Atan2(dy, dx) - s.Yaw);
        double targetSpeed, targetYawRate;
        if (_dwellRemaining > 0)
        {
            targetSpeed = 0;
            targetYawRate = 0;
            if (s.Speed <= 1e-9)
            {
                _dwellRemaining -= dt;
            }
        }
        else
        {
            targetYawRate = Math.Clamp(2.0 * headingError, -p.MaxYawRate, p.MaxYawRate);
            if (Math.Abs(headingError) > TurnInPlaceAngle)
            {
                // Nearly on the spot: creep while turning so the robot does not cut into a rack.
                targetSpeed = 0.05;
            }
            else
            {
                var brake = Math.Sqrt((p.CornerSpeed * p.CornerSpeed) + (2 * p.Deceleration * Math.Max(0, distance - ArrivalRadius)));
                targetSpeed = Math.Min(p.CruiseSpeed * Math.Cos(headingError), brake);
            }
        }

        var speed = s.Speed < targetSpeed
            ? Math.Min(targetSpeed, s.Speed + (p.Acceleration * dt))
            : Math.Max(targetSpeed, s.Speed - (p.Deceleration * dt));
        var maxYawChange = p.YawAcceleration * dt;
        var yawRate = s.YawRate + Math.Clamp(targetYawRate - s.YawRate, -maxYawChange, maxYawChange);

        var yaw = WrapAngle(s.Yaw + (yawRate * dt));
        var x = s.X + (speed * Math.Cos(yaw) * dt);
        var y = s.Y + (speed * Math.Sin(yaw) * dt);
        return new RobotState(s.Time + dt, x, y, yaw, speed, yawRate);
    }
}
