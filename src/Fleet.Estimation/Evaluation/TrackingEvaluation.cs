using Fleet.Estimation.Anchors;
using Fleet.Estimation.Bias;
using Fleet.Estimation.Filtering;
using Fleet.Estimation.Geometry;
using Fleet.Estimation.Measurements;
using MathNet.Numerics.Distributions;

namespace Fleet.Estimation.Evaluation;

/// <summary>Settings of one evaluation run: filter settings per robot and how truth is compared.</summary>
public sealed record EvaluationSettings
{
    /// <summary>Builds the filter options of a robot from its declared motion model and tag lever arm.</summary>
    public required Func<MotionModelKind, Vector3D, FilterOptions> OptionsFor { get; init; }

    /// <summary>Shared bias model, or null for none. Each robot gets its own instance via <see cref="BiasModelFactory"/>.</summary>
    public Func<ITdoaBiasModel>? BiasModelFactory { get; init; }

    /// <summary>Truth samples are scored only after the robot has been tracked for this long (s), so the first fix is not scored.</summary>
    public double SettleSeconds { get; init; } = 2.0;

    /// <summary>Two-sided probability of the NEES consistency band (0.95 → [χ²(0.025), χ²(0.975)]).</summary>
    public double NeesBandProbability { get; init; } = 0.95;
}

/// <summary>Accumulated errors against truth for one robot, or for the whole run.</summary>
public sealed class ErrorAccumulator
{
    public long Samples { get; private set; }
    public double SumSquaredHorizontal { get; private set; }
    public double SumSquaredVertical { get; private set; }
    public long NeesSamples { get; private set; }
    public long NeesInBand { get; private set; }
    public long Measurements { get; private set; }
    public long Accepted { get; private set; }
    public long DownWeighted { get; private set; }
    public long Rejected { get; private set; }
    public long Reinitialisations { get; set; }

    /// <summary>Truth samples seen while the robot was not tracked (acquiring or lost) after its first fix.</summary>
    public long UntrackedTruthSamples { get; private set; }

    /// <summary>Fraction of truth samples after the first fix that found the robot tracked.</summary>
    public double TrackedFraction => Samples + UntrackedTruthSamples == 0 ? double.NaN : (double)Samples / (Samples + UntrackedTruthSamples);

    internal void AddUntracked() => UntrackedTruthSamples++;
    public List<double> HorizontalErrors { get; } = [];

    /// <summary>Time (s) of each entry of <see cref="HorizontalErrors"/> (the truth record's time), same order.</summary>
    public List<double> ErrorTimes { get; } = [];

    public double RmseHorizontal => Samples == 0 ? double.NaN : Math.Sqrt(SumSquaredHorizontal / Samples);
    public double RmseVertical => Samples == 0 ? double.NaN : Math.Sqrt(SumSquaredVertical / Samples);
    public double Rmse3D => Samples == 0 ? double.NaN : Math.Sqrt((SumSquaredHorizontal + SumSquaredVertical) / Samples);
    public double RejectionRate => Measurements == 0 ? 0 : (double)Rejected / Measurements;
    public double DownWeightRate => Measurements == 0 ? 0 : (double)DownWeighted / Measurements;
    public double NeesInBandFraction => NeesSamples == 0 ? double.NaN : (double)NeesInBand / NeesSamples;

    internal void AddOutcome(UpdateOutcome outcome)
    {
        Measurements++;
        switch (outcome)
        {
            case UpdateOutcome.Accepted: Accepted++; break;
            case UpdateOutcome.DownWeighted: DownWeighted++; break;
            case UpdateOutcome.Rejected: Rejected++; break;
            default: break;
        }
    }

    internal void AddError(double time, Vector3D error, double? nees, bool neesInBand)
    {
        Samples++;
        ErrorTimes.Add(time);
        var h2 = (error.X * error.X) + (error.Y * error.Y);
        SumSquaredHorizontal += h2;
        SumSquaredVertical += error.Z * error.Z;
        HorizontalErrors.Add(Math.Sqrt(h2));
        if (nees is not null)
        {
            NeesSamples++;
            if (neesInBand)
            {
                NeesInBand++;
            }
        }
    }

    /// <summary>Horizontal error percentile (0–1), NaN when there are no samples.</summary>
    public double HorizontalPercentile(double p)
    {
        if (HorizontalErrors.Count == 0)
        {
            return double.NaN;
        }

        var sorted = HorizontalErrors.ToArray();
        Array.Sort(sorted);
        return MathNet.Numerics.Statistics.SortedArrayStatistics.Quantile(sorted, p);
    }
}

/// <summary>Result of replaying a record stream through one filter per robot.</summary>
public sealed record EvaluationResult(
    ErrorAccumulator Overall,
    IReadOnlyDictionary<string, ErrorAccumulator> PerRobot,
    long UnknownAnchorMeasurements,
    long Records);

/// <summary>
/// Replays observation records (a measurement log or a recording) through one <see cref="RobotFilter"/> per robot
/// and scores the tag position against truth lines. Pure: the caller does the I/O.
/// </summary>
public sealed class TrackingEvaluation
{
    private readonly SiteLayout _site;
    private readonly EvaluationSettings _settings;
    private readonly Dictionary<string, RobotTrack> _robots = new(StringComparer.Ordinal);
    private readonly ErrorAccumulator _overall = new();
    private readonly double _neesLow;
    private readonly double _neesHigh;
    private long _unknownAnchors;
    private long _records;

    public TrackingEvaluation(SiteLayout site, EvaluationSettings settings)
    {
        _site = site;
        _settings = settings;
        var tail = (1 - settings.NeesBandProbability) / 2;

        // NEES of a 3-D position error is χ²(3) for a consistent filter (Bar-Shalom et al. 2001, §5.4; from memory).
        _neesLow = ChiSquared.InvCDF(3, tail);
        _neesHigh = ChiSquared.InvCDF(3, 1 - tail);
    }

    public void Add(ObservationRecord record)
    {
        _records++;
        switch (record)
        {
            case RobotRecord robot:
                _robots[robot.Robot] = CreateTrack(robot.Robot, robot.TagOffset, robot.Motion);
                break;
            case TdoaRecord tdoa:
                AddTdoa(tdoa);
                break;
            case OdometryRecord odom:
                TrackFor(odom.Robot).Filter.SubmitOdometry(new OdometryMeasurement(odom.Time, odom.ForwardSpeed, odom.YawRate));
                break;
            case TruthRecord truth:
                Score(truth);
                break;
            default:
                break;
        }
    }

    public EvaluationResult Finish()
    {
        foreach (var track in _robots.Values)
        {
            track.Errors.Reinitialisations = track.Filter.Counters.Reinitialisations;
            _overall.Reinitialisations += track.Errors.Reinitialisations;
        }

        return new EvaluationResult(
            _overall,
            _robots.OrderBy(p => p.Key, StringComparer.Ordinal).ToDictionary(p => p.Key, p => p.Value.Errors, StringComparer.Ordinal),
            _unknownAnchors,
            _records);
    }

    private void AddTdoa(TdoaRecord tdoa)
    {
        var track = TrackFor(tdoa.Robot);
        UpdateResult result;
        if (!_site.Anchors.TryGetIndex(tdoa.AnchorA, out var a) || !_site.Anchors.TryGetIndex(tdoa.AnchorB, out var b))
        {
            _unknownAnchors++;
            result = UpdateResult.Reject(RejectionReason.UnknownAnchor);
        }
        else
        {
            result = track.Filter.Submit(new TdoaMeasurement(tdoa.Time, a, b, tdoa.DistanceDifference));
        }

        if (result.Outcome != UpdateOutcome.Buffered)
        {
            track.Errors.AddOutcome(result.Outcome);
            _overall.AddOutcome(result.Outcome);
        }
    }

    private void Score(TruthRecord truth)
    {
        if (!_robots.TryGetValue(truth.Robot, out var track))
        {
            return;
        }

        var filter = track.Filter;
        if (filter.State is TrackingState.Acquiring or TrackingState.Lost || double.IsNaN(filter.LastTime))
        {
            if (track.EverTracked)
            {
                track.Errors.AddUntracked();
                _overall.AddUntracked();
            }

            track.TrackedSince = double.NaN;
            return;
        }

        track.EverTracked = true;

        if (double.IsNaN(track.TrackedSince))
        {
            track.TrackedSince = truth.Time;
        }

        if (truth.Time - track.TrackedSince < _settings.SettleSeconds)
        {
            return;
        }

        filter.PredictPose(truth.Time, track.Pose);
        var error = track.Pose.TagPosition - truth.TagPosition;
        var nees = TagNees(track, error);
        var inBand = nees is { } n && n >= _neesLow && n <= _neesHigh;
        track.Errors.AddError(truth.Time, error, nees, inBand);
        _overall.AddError(truth.Time, error, nees, inBand);
    }

    /// <summary>
    /// NEES of the tag position error: eᵀ Σ⁻¹ e with Σ = J P Jᵀ, where J maps (reference point, yaw) to the tag
    /// position (tag = p + Rz(yaw)·lever). Null when the covariance is not invertible.
    /// </summary>
    private static double? TagNees(RobotTrack track, Vector3D error)
    {
        var pose = track.Pose;
        var lever = track.LeverArm;
        var (s, c) = Math.SinCos(pose.Yaw);

        // ∂tag/∂yaw = dRz/dyaw · lever (z component zero).
        var dx = (-s * lever.X) - (c * lever.Y);
        var dy = (c * lever.X) - (s * lever.Y);
        Span<double> j = [1, 0, 0, dx, 0, 1, 0, dy, 0, 0, 1, 0];
        if (track.Motion == MotionModelKind.ConstantVelocity3D)
        {
            // No yaw in this model: the tag is the state position, and the yaw placeholder variance must not leak in.
            j[3] = 0;
            j[7] = 0;
        }

        Span<double> sigma = stackalloc double[9];
        for (var r = 0; r < 3; r++)
        {
            for (var col = 0; col < 3; col++)
            {
                double sum = 0;
                for (var k = 0; k < 4; k++)
                {
                    for (var l = 0; l < 4; l++)
                    {
                        sum += j[(r * 4) + k] * pose[k, l] * j[(col * 4) + l];
                    }
                }

                sigma[(r * 3) + col] = sum;
            }
        }

        var m = MathNet.Numerics.LinearAlgebra.Matrix<double>.Build.DenseOfRowMajor(3, 3, sigma.ToArray());
        var det = m.Determinant();
        if (!(det > 0) || !double.IsFinite(det))
        {
            return null;
        }

        var e = MathNet.Numerics.LinearAlgebra.Vector<double>.Build.DenseOfArray([error.X, error.Y, error.Z]);
        return e * m.Solve(e);
    }

    private RobotTrack TrackFor(string robot)
    {
        if (!_robots.TryGetValue(robot, out var track))
        {
            // A robot that was never declared: assume a ground robot with the tag at the reference point.
            track = CreateTrack(robot, Vector3D.Zero, MotionModelKind.PlanarOdometry);
            _robots[robot] = track;
        }

        return track;
    }

    private RobotTrack CreateTrack(string robot, Vector3D leverArm, MotionModelKind motion)
    {
        var options = _settings.OptionsFor(motion, leverArm);
        var bias = _settings.BiasModelFactory?.Invoke();
        return new RobotTrack(robot, new RobotFilter(_site.Anchors, options, bias), leverArm, motion);
    }

    private sealed class RobotTrack(string robot, RobotFilter filter, Vector3D leverArm, MotionModelKind motion)
    {
        public string Robot { get; } = robot;
        public RobotFilter Filter { get; } = filter;
        public Vector3D LeverArm { get; } = leverArm;
        public MotionModelKind Motion { get; } = motion;
        public PoseEstimate Pose { get; } = new();
        public ErrorAccumulator Errors { get; } = new();
        public double TrackedSince { get; set; } = double.NaN;
        public bool EverTracked { get; set; }
    }
}
