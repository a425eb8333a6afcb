using System.Numerics;
using System.Runtime.CompilerServices;
using Fleet.Estimation.Anchors;
using Fleet.Estimation.Bias;
using Fleet.Estimation.Geometry;
using Fleet.Estimation.Measurements;

namespace Fleet.Estimation.Filtering;

/// <summary>
/// Robust TDOA tracking filter for one robot: validate → bias-correct → iterated, reweighted EKF update
/// (M-estimation with a χ² gate) → health tracking. One instance per robot; NOT thread-safe (the caller serialises).
/// <para>
/// Events (TDOA and odometry) are applied in time order. In-order events are applied at once. An event up to
/// <see cref="FilterOptions.ReorderLagSeconds"/> older than the newest applied one is applied exactly: the filter
/// restores the state saved before the first later event, applies the late event and replays the later ones from a
/// small preallocated ring. Older events are rejected <see cref="RejectionReason.TooLate"/>.
/// </para>
/// <para>
/// The per-event path (Submit, SubmitOdometry, GetPose, PredictPose) does not allocate in steady state.
/// Acquisition (a robust multilateration of a short burst) allocates; it is rare.
/// </para>
/// </summary>
public sealed class RobotFilter
{
    private const string ReasonFix = "fix acquired";
    private const string ReasonSeeded = "pose seeded";
    private const string ReasonReset = "reset";
    private const string ReasonReacquire = "re-acquiring";
    private const string ReasonNonFinite = "non-finite state or covariance";
    private const string ReasonBlowUp = "covariance blow-up";
    private const string ReasonRejections = "long run of rejected measurements";
    private const string ReasonTimeJump = "time discontinuity";
    private const string ReasonOutside = "estimate left the site";
    private const string ReasonUncertain = "large uncertainty or many rejections";
    private const string ReasonRecovered = "uncertainty and rejections back to normal";

    private const int HeaderLength = 14;
    private const double MinimumWindowForRatio = 8;
    private const double HeadingFromVelocityMinSpeed = 0.2;

    /// <summary>Every 32nd health evaluation scans all of P (the others check its diagonal only).</summary>
    private const int FullHealthCheckMask = 31;

    /// <summary>Median of χ²(1), i.e. 0.6745²: the NIS of a normal innovation is below it half the time.</summary>
    private const double MedianNisOfNormal = 0.454936;

    /// <summary>Pose covariance index of each constant-velocity state (x, y, z, vx, vy, vz → 0, 1, 2, 4, 5, 6).</summary>
    private static readonly int[] ConstantVelocityToPose = [0, 1, 2, 4, 5, 6];

    private readonly FilterOptions _options;
    private readonly MotionModelKind _kind;
    private readonly bool _planar;
    private readonly int _n;
    private readonly double _measurementVariance;
    private readonly double _kernelConstant;
    private readonly double _gateThreshold;
    private readonly bool _adaptiveNoise;
    private readonly double _noiseStepUp;
    private readonly double _noiseStepDown;
    private readonly RobustKernel _kernel;
    private readonly Vector3D _lever;

    private readonly double[] _x;
    private readonly double[] _p;

    // Rollback ring: event i and the filter state saved just before it was applied.
    private readonly int _stride;
    private readonly int _capacity;
    private readonly double[] _snapshots;
    private readonly RingEvent[] _events;

    private readonly TdoaMeasurement[] _burst;

    private AnchorMap _map;

    // Bounding box of the anchors grown by the site margin; an estimate outside it has diverged.
    private Vector3D _boundsLow;
    private Vector3D _boundsHigh;
    private ITdoaBiasModel? _bias;
    private double _time = double.NaN;

    // Latest odometry (zero-order hold).
    private double _odoV;
    private double _odoW;
    private double _odoTime = double.NaN;

    // Planar heading: unknown after a fix until the tag displacement can be compared with the odometry path.
    private bool _yawKnown;
    private bool _alignActive;
    private double _alignLocalX;
    private double _alignLocalY;
    private double _alignLocalYaw;
    private double _alignStartX;
    private double _alignStartY;
    private double _alignStartVariance;

    private TrackingState _state = TrackingState.Acquiring;
    private int _ringStart;
    private int _ringCount;
    private int _burstCount;
    private int _burstSinceAttempt;
    private bool _burstAttempted;
    private int _jumpCount;
    private double _jumpTime;
    private int _consecutiveRejections;

    // Run of consecutive model rejections as seen by the update itself (part of the rollback snapshot).
    private int _gatedRun;

    // Adaptive TDOA noise scale k ≥ 1 (R = k²·σ²), tracking the running median of the standardised innovations.
    private double _noiseScale = 1.0;
    private ulong _rejectionBits;
    private int _windowFill;
    private int _healthCount;

    /// <summary>Creates a filter in <see cref="TrackingState.Acquiring"/>. Throws <see cref="ArgumentException"/> for invalid options.</summary>
    public RobotFilter(AnchorMap map, FilterOptions options, ITdoaBiasModel? biasModel = null)
    {
        ArgumentNullException.ThrowIfNull(map);
        ArgumentNullException.ThrowIfNull(options);
        options.Validate();
        _options = options;
        _map = map;
        _bias = biasModel;
        _kind = options.Motion;
        _planar = _kind == MotionModelKind.PlanarOdometry;
        _n = TdoaMeasurementModel.StateDimension(_kind);
        _measurementVariance = options.TdoaSigmaMetres * options.TdoaSigmaMetres;
        _kernel = options.Kernel;
        _kernelConstant = options.EffectiveKernelConstant;
        _gateThreshold = options.GateThreshold;
        _adaptiveNoise = options.AdaptiveNoise && _kernel != RobustKernel.LeastSquares;
        _noiseStepUp = Math.Exp(options.NoiseScaleRate);
        _noiseStepDown = Math.Exp(-options.NoiseScaleRate);
        _lever = _planar ? options.TagLeverArm : Vector3D.Zero;
        _x = new double[_n];
        _p = new double[_n * _n];
        _capacity = options.ReorderCapacity;
        _stride = HeaderLength + _n + (_n * (_n + 1) / 2);
        _snapshots = new double[_capacity * _stride];
        _events = new RingEvent[_capacity];
        _burst = new TdoaMeasurement[options.InitBurstCapacity];
        SetBounds(map);
    }

    /// <summary>Raised on every tracking-state change with (from, to, reason); e.g. divergence gives (Locked, Lost) then (Lost, Acquiring).</summary>
    public event Action<TrackingState, TrackingState, string>? StateChanged;

    public TrackingState State => _state;

    /// <summary>Time (s) of the latest applied or buffered event; NaN before any.</summary>
    public double LastTime => _time;

    public FilterCounters Counters { get; } = new();

    public FilterOptions Options => _options;

    public AnchorMap AnchorMap => _map;

    /// <summary>
    /// Fraction (0–1) of the recent TDOAs (window <see cref="FilterOptions.RejectionWindow"/>) that reached the model
    /// and were rejected as implausible, gated or given zero weight. Malformed or mistimed inputs do not count.
    /// </summary>
    public double RecentRejectionRatio => _windowFill == 0
        ? 0.0
        : BitOperations.PopCount(_rejectionBits & WindowMask) / (double)_windowFill;

    /// <summary>Planar model: whether the heading is known (seeded, or aligned from motion). Always false for constant velocity.</summary>
    public bool HeadingKnown => _planar && _yawKnown && _state != TrackingState.Acquiring;

    internal ReadOnlySpan<double> StateVector => _x;

    internal ReadOnlySpan<double> CovarianceMatrix => _p;

    internal int StateDimension => _n;

    private ulong WindowMask => _options.RejectionWindow >= 64 ? ulong.MaxValue : (1UL << _options.RejectionWindow) - 1;

    /// <summary>Submits one TDOA. Never throws for bad data: every problem is a <see cref="RejectionReason"/>.</summary>
    /// <remarks>The per-event methods are compiled fully optimised at first use (no tiered warm-up): a server's first measurements must be fast too.</remarks>
    [MethodImpl(MethodImplOptions.AggressiveOptimization)]
    public UpdateResult Submit(in TdoaMeasurement m)
    {
        var result = SubmitCore(m);
        Counters.Count(result);
        return result;
    }

    /// <summary>Submits one odometry sample (forward speed m/s, yaw rate rad/s). Ignored by the constant-velocity model.</summary>
    public UpdateResult SubmitOdometry(in OdometryMeasurement m)
    {
        var result = SubmitOdometryCore(m);
        if (result.Outcome == UpdateOutcome.Accepted)
        {
            Counters.CountOdometry();
        }
        else
        {
            Counters.Count(result);
        }

        return result;
    }

    /// <summary>Installs a new anchor map; measurement indices refer to it from now on. Pending rollback history and the init burst are dropped.</summary>
    public void SetAnchorMap(AnchorMap map)
    {
        ArgumentNullException.ThrowIfNull(map);
        _map = map;
        SetBounds(map);
        _ringCount = 0;
        _burstCount = 0;
        _burstAttempted = false;
    }

    /// <summary>Installs or removes the bias model. Rollback history is dropped (replays must use one model).</summary>
    public void SetBiasModel(ITdoaBiasModel? model)
    {
        _bias = model;
        _ringCount = 0;
    }

    /// <summary>Forgets everything except the counters; the filter returns to <see cref="TrackingState.Acquiring"/> and <see cref="LastTime"/> to NaN.</summary>
    public void Reset()
    {
        ClearTrack();
        _time = double.NaN;
        _odoTime = double.NaN;
        _odoV = 0;
        _odoW = 0;
        _jumpCount = 0;
        _rejectionBits = 0;
        _windowFill = 0;
        SetState(TrackingState.Acquiring, ReasonReset);
    }

    /// <summary>
    /// Starts tracking from a known pose at <paramref name="time"/> (s). <paramref name="position"/> is the robot
    /// reference point (planar) or the tag (constant velocity), site frame (m). A planar yaw with sigma above
    /// <see cref="FilterOptions.MaxAlignedYawSigma"/> is treated as unknown and aligned later from motion.
    /// </summary>
    public void SeedPose(double time, Vector3D position, double yaw, double positionSigma, double yawSigma)
    {
        if (!double.IsFinite(time) || !position.IsFinite || !double.IsFinite(yaw))
        {
            throw new ArgumentException("seed time, position and yaw must be finite");
        }

        if (!(positionSigma > 0) || !double.IsFinite(positionSigma))
        {
            throw new ArgumentOutOfRangeException(nameof(positionSigma), positionSigma, "must be positive and finite");
        }

        if (!(yawSigma > 0))
        {
            throw new ArgumentOutOfRangeException(nameof(yawSigma), yawSigma, "must be positive (+∞ means unknown)");
        }

        ClearTrack();
        _time = time;
        var pv = positionSigma * positionSigma;
        if (!_planar)
        {
            _x[0] = position.X;
            _x[1] = position.Y;
            _x[2] = position.Z;
            SetDiagonal(0, pv);
            SetDiagonal(1, pv);
            SetDiagonal(2, pv);
            var vv = _options.InitialVelocitySigma * _options.InitialVelocitySigma;
            SetDiagonal(3, vv);
            SetDiagonal(4, vv);
            SetDiagonal(5, vv);
        }
        else if (yawSigma <= _options.MaxAlignedYawSigma)
        {
            _x[0] = position.X;
            _x[1] = position.Y;
            _x[2] = position.Z;
            _x[3] = PlanarOdometryModel.WrapAngle(yaw);
            SetDiagonal(0, pv);
            SetDiagonal(1, pv);
            SetDiagonal(2, pv);
            SetDiagonal(3, yawSigma * yawSigma);
            _yawKnown = true;
        }
        else
        {
            // Heading unknown: track the tag directly; its horizontal offset from the reference point is unknown within the lever radius.
            var lxy = (_lever.X * _lever.X) + (_lever.Y * _lever.Y);
            _x[0] = position.X;
            _x[1] = position.Y;
            _x[2] = position.Z + _lever.Z;
            _x[3] = 0;
            SetDiagonal(0, pv + lxy);
            SetDiagonal(1, pv + lxy);
            SetDiagonal(2, pv);
            SetDiagonal(3, Math.PI * Math.PI);
            StartAlignment();
        }

        Counters.CountInitialisation();
        SetState(TrackingState.Locked, ReasonSeeded);
        EvaluateHealth();
    }

    /// <summary>
    /// Writes the estimate at <see cref="LastTime"/>. While acquiring, positions and velocity are NaN and the
    /// covariance diagonal is <see cref="PoseEstimate.UnobservedVariance"/>. No allocation.
    /// </summary>
    public void GetPose(PoseEstimate into)
    {
        ArgumentNullException.ThrowIfNull(into);
        FillPose(_x, _p, _time, into);
    }

    /// <summary>
    /// Writes the estimate predicted to <paramref name="time"/> (s) without changing the filter (for fleet snapshots).
    /// Times at or before <see cref="LastTime"/> give the estimate at <see cref="LastTime"/>. No allocation.
    /// </summary>
    public void PredictPose(double time, PoseEstimate into)
    {
        ArgumentNullException.ThrowIfNull(into);
        if (_state == TrackingState.Acquiring || !double.IsFinite(time) || !(time > _time))
        {
            FillPose(_x, _p, _time, into);
            return;
        }

        Span<double> x = stackalloc double[6];
        Span<double> p = stackalloc double[36];
        _x.AsSpan().CopyTo(x);
        _p.AsSpan().CopyTo(p);
        Predict(x[.._n], p[..(_n * _n)], time - _time, time, mutateAlignment: false);
        FillPose(x[.._n], p[..(_n * _n)], time, into);
    }

    [MethodImpl(MethodImplOptions.AggressiveOptimization)]
    private UpdateResult SubmitCore(in TdoaMeasurement m)
    {
        if (!double.IsFinite(m.Time) || !double.IsFinite(m.DistanceDifference))
        {
            return UpdateResult.Reject(RejectionReason.NonFinite);
        }

        if ((uint)m.AnchorA >= (uint)_map.Count || (uint)m.AnchorB >= (uint)_map.Count)
        {
            return UpdateResult.Reject(RejectionReason.UnknownAnchor);
        }

        if (m.AnchorA == m.AnchorB)
        {
            return UpdateResult.Reject(RejectionReason.SameAnchor);
        }

        if (Math.Abs(m.DistanceDifference) > TdoaMeasurementModel.MaximumMagnitude(_map[m.AnchorA], _map[m.AnchorB]) + _options.ImpossibleValueMarginMetres)
        {
            if (_state != TrackingState.Acquiring)
            {
                PushWindow(rejected: true);
            }

            return UpdateResult.Reject(RejectionReason.ImpossibleValue);
        }

        if (_state == TrackingState.Acquiring)
        {
            return Acquire(m);
        }

        switch (ClassifyTime(m.Time))
        {
            case TimeClass.Confirmed:
                LoseTrack(ReasonTimeJump);
                return Acquire(m);
            case TimeClass.Future:
                return UpdateResult.Reject(RejectionReason.TooFarInFuture);
            case TimeClass.TooLate:
                return UpdateResult.Reject(RejectionReason.TooLate);
        }

        var ev = new RingEvent(m.Time, m.DistanceDifference, 0, m.AnchorA, m.AnchorB, false);
        if (HoldsAlready(ev))
        {
            return UpdateResult.Reject(RejectionReason.Duplicate);
        }

        UpdateResult result;
        if (m.Time >= _time)
        {
            RecordAt(_ringCount, ev);
            result = ApplyEvent(ev);
        }
        else if (!TryApplyLate(ev, out result))
        {
            return UpdateResult.Reject(RejectionReason.TooLate);
        }

        var modelRejected = result.Reason is RejectionReason.ChiSquareGate or RejectionReason.ZeroWeight;
        PushWindow(modelRejected);
        _consecutiveRejections = modelRejected ? _consecutiveRejections + 1 : 0;
        EvaluateHealth();
        return result;
    }

    private UpdateResult SubmitOdometryCore(in OdometryMeasurement m)
    {
        if (!double.IsFinite(m.Time) || !double.IsFinite(m.ForwardSpeed) || !double.IsFinite(m.YawRate))
        {
            return UpdateResult.Reject(RejectionReason.NonFinite);
        }

        if (Math.Abs(m.ForwardSpeed) > _options.MaxPlausibleSpeed || Math.Abs(m.YawRate) > _options.MaxPlausibleYawRate)
        {
            return UpdateResult.Reject(RejectionReason.ImpossibleValue);
        }

        if (!_planar)
        {
            return new UpdateResult(UpdateOutcome.Ignored, RejectionReason.None, 0, double.NaN);
        }

        var accepted = new UpdateResult(UpdateOutcome.Accepted, RejectionReason.None, 1, double.NaN);
        if (_state == TrackingState.Acquiring)
        {
            // Only the hold matters before a fix; keep the newest sample.
            if (double.IsNaN(_odoTime) || m.Time >= _odoTime || Math.Abs(m.Time - _odoTime) > _options.MaxPredictionGapSeconds)
            {
                _odoV = m.ForwardSpeed;
                _odoW = m.YawRate;
                _odoTime = m.Time;
            }

            return accepted;
        }

        switch (ClassifyTime(m.Time))
        {
            case TimeClass.Confirmed:
                LoseTrack(ReasonTimeJump);
                _odoV = m.ForwardSpeed;
                _odoW = m.YawRate;
                _odoTime = m.Time;
                return accepted;
            case TimeClass.Future:
                return UpdateResult.Reject(RejectionReason.TooFarInFuture);
            case TimeClass.TooLate:
                return UpdateResult.Reject(RejectionReason.TooLate);
        }

        var ev = new RingEvent(m.Time, m.ForwardSpeed, m.YawRate, 0, 0, true);
        if (HoldsAlready(ev))
        {
            return UpdateResult.Reject(RejectionReason.Duplicate);
        }

        if (m.Time >= _time)
        {
            RecordAt(_ringCount, ev);
            ApplyEvent(ev);
        }
        else if (!TryApplyLate(ev, out _))
        {
            return UpdateResult.Reject(RejectionReason.TooLate);
        }

        EvaluateHealth();
        return accepted;
    }

    private enum TimeClass
    {
        InOrder,
        Late,
        TooLate,
        Future,
        Confirmed,
    }

    /// <summary>Classifies an event time against <see cref="LastTime"/>; far outliers must repeat consistently before they are believed.</summary>
    private TimeClass ClassifyTime(double t)
    {
        var gap = _options.MaxPredictionGapSeconds;
        var future = t > _time + gap;
        if (future || t < _time - gap)
        {
            _jumpCount = _jumpCount > 0 && Math.Abs(t - _jumpTime) <= gap ? _jumpCount + 1 : 1;
            _jumpTime = t;
            if (_jumpCount >= _options.TimeJumpConfirmCount)
            {
                _jumpCount = 0;
                return TimeClass.Confirmed;
            }

            return future ? TimeClass.Future : TimeClass.TooLate;
        }

        _jumpCount = 0;
        if (t >= _time)
        {
            return TimeClass.InOrder;
        }

        return t >= _time - _options.ReorderLagSeconds ? TimeClass.Late : TimeClass.TooLate;
    }

    [MethodImpl(MethodImplOptions.AggressiveOptimization)]
    private UpdateResult ApplyEvent(in RingEvent ev)
    {
        PredictTo(ev.Time);
        if (ev.IsOdometry)
        {
            _odoV = ev.Value1;
            _odoW = ev.Value2;
            _odoTime = ev.Time;
            return default;
        }

        var z = ev.Value1;
        if (_bias is not null)
        {
            var tag = CurrentTagPosition();
            var bias = _bias.PredictTdoaBias(_map, ev.AnchorA, ev.AnchorB, tag, CurrentYawForBias());

            // A broken bias prediction must not poison the state: fall back to the raw value.
            if (double.IsFinite(bias))
            {
                z -= bias;
            }
        }

        var result = RobustUpdate(ev.AnchorA, ev.AnchorB, z);
        if (_planar && !_yawKnown && result.Outcome != UpdateOutcome.Rejected)
        {
            TryAlignHeading();
        }

        return result;
    }

    /// <summary>
    /// Iterated, reweighted EKF update for one TDOA. Per iteration i: r = z − h(xᵢ) − H(x̄ − xᵢ), S = H·P̄·Hᵀ + R,
    /// u = r/√S/c, w = w(u), gain with R/w. The prior NIS (iteration 0) is gated. Covariance in Joseph form.
    /// </summary>
    [MethodImpl(MethodImplOptions.AggressiveOptimization)]
    private UpdateResult RobustUpdate(int anchorA, int anchorB, double z)
    {
        var n = _n;
        Span<double> xPrior = stackalloc double[6];
        Span<double> xi = stackalloc double[6];
        Span<double> h = stackalloc double[6];
        Span<double> ph = stackalloc double[6];
        Span<double> k = stackalloc double[6];
        xPrior = xPrior[..n];
        xi = xi[..n];
        _x.AsSpan().CopyTo(xPrior);
        _x.AsSpan().CopyTo(xi);

        var lever = _planar && _yawKnown ? _lever : Vector3D.Zero;
        var nis = double.NaN;
        var standardized = double.NaN;
        var weight = 1.0;
        var baseVariance = _measurementVariance * _noiseScale * _noiseScale;
        var rEffective = baseVariance;
        var hph = 0.0;

        // A step this small against the measurement sigma no longer changes the linearisation in any way that matters.
        var stepTolerance = 1e-3 * _options.TdoaSigmaMetres;
        var maxIterations = _kernel == RobustKernel.LeastSquares ? 1 : _options.MaxIrlsIterations;
        for (var iteration = 0; iteration < maxIterations; iteration++)
        {
            var predicted = TdoaMeasurementModel.Evaluate(_kind, xi, lever, _map, anchorA, anchorB, h);
            var r = z - predicted;
            for (var j = 0; j < n; j++)
            {
                var d = xPrior[j] - xi[j];
                if (_planar && j == 3)
                {
                    d = PlanarOdometryModel.WrapAngle(d);
                }

                r -= h[j] * d;
            }

            hph = ProjectCovariance(h, ph);
            var s = hph + baseVariance;
            if (!(s > 0) || !double.IsFinite(s) || !double.IsFinite(r))
            {
                return UpdateResult.Reject(RejectionReason.NonFinite);
            }

            var normalized = r / Math.Sqrt(s);
            if (iteration == 0)
            {
                nis = normalized * normalized;
                standardized = normalized;
                AdaptNoiseScale(nis);
                if (_options.GateEnabled && nis > _gateThreshold)
                {
                    InflateAfterRejection();
                    return new UpdateResult(UpdateOutcome.Rejected, RejectionReason.ChiSquareGate, 0, nis, standardized);
                }
            }

            var newWeight = RobustKernels.Weight(_kernel, normalized / _kernelConstant);
            if (!(newWeight > 0))
            {
                InflateAfterRejection();
                return new UpdateResult(UpdateOutcome.Rejected, RejectionReason.ZeroWeight, 0, nis, standardized);
            }

            rEffective = baseVariance / newWeight;
            var inverseS = 1.0 / (hph + rEffective);
            var step = 0.0;
            for (var j = 0; j < n; j++)
            {
                k[j] = ph[j] * inverseS;
                var next = xPrior[j] + (k[j] * r);
                if (_planar && j == 3)
                {
                    next = PlanarOdometryModel.WrapAngle(next);
                }

                step = Math.Max(step, Math.Abs(next - xi[j]));
                xi[j] = next;
            }

            var settled = iteration > 0 && Math.Abs(newWeight - weight) < 1e-3 && step < stepTolerance;
            weight = newWeight;
            if (settled)
            {
                break;
            }
        }

        _gatedRun = 0;
        xi.CopyTo(_x);
        KalmanMath.JosephUpdateScalar(_p, ph, hph, k, rEffective, n);
        if (!_planar)
        {
            LimitSpeed();
        }

        var outcome = weight >= 0.99 ? UpdateOutcome.Accepted : UpdateOutcome.DownWeighted;
        return new UpdateResult(outcome, RejectionReason.None, weight, nis, standardized);
    }

    /// <summary>
    /// ph ← P·hᵀ and returns h·P·hᵀ. The constant-velocity Jacobian is zero on the velocities, so only the first
    /// three columns of P contribute (half the work); the planar Jacobian is dense.
    /// </summary>
    [MethodImpl(MethodImplOptions.AggressiveOptimization)]
    private double ProjectCovariance(ReadOnlySpan<double> h, Span<double> ph)
    {
        var n = _n;
        var p = _p;
        var hph = 0.0;
        if (!_planar)
        {
            double h0 = h[0], h1 = h[1], h2 = h[2];
            for (var i = 0; i < n; i++)
            {
                var row = i * n;
                var v = (p[row] * h0) + (p[row + 1] * h1) + (p[row + 2] * h2);
                ph[i] = v;
            }

            return (h0 * ph[0]) + (h1 * ph[1]) + (h2 * ph[2]);
        }

        for (var i = 0; i < n; i++)
        {
            var row = i * n;
            var v = 0.0;
            for (var j = 0; j < n; j++)
            {
                v += p[row + j] * h[j];
            }

            ph[i] = v;
            hph += h[i] * v;
        }

        return hph;
    }

    /// <summary>
    /// Robust adaptive measurement noise: k moves up by a fixed log-step when the prior standardised innovation
    /// exceeds the normal median 0.6745 and down otherwise, so it settles where half the innovations are below
    /// 0.6745·√S (a stochastic-approximation estimate of the median, hence of a robust scale; common practice).
    /// Dense NLOS widens the innovations, k grows, and the gate and weights follow the real spread instead of
    /// rejecting good and bad alike; in clean conditions k stays at its floor 1 and nothing changes.
    /// </summary>
    private void AdaptNoiseScale(double nis)
    {
        if (!_adaptiveNoise)
        {
            return;
        }

        var up = nis > MedianNisOfNormal;
        _noiseScale = Math.Clamp(_noiseScale * (up ? _noiseStepUp : _noiseStepDown), 1.0, _options.MaxNoiseScale);
    }

    /// <summary>
    /// A run of rejections is either a burst of outliers or a state that has drifted away from the data while its
    /// covariance stayed small; the gate would then lock the data out for good. Past a short run, each further
    /// rejection scales P up, so a drifted track re-opens its gate and converges again instead of diverging.
    /// Scaling P keeps it symmetric positive definite.
    /// </summary>
    private void InflateAfterRejection()
    {
        _gatedRun++;
        if (_gatedRun <= _options.RejectionRunBeforeInflation)
        {
            return;
        }

        // P ← D·P·D with D = √factor on the position (and planar yaw) entries, 1 elsewhere: the position block
        // grows by the factor, its cross terms by √factor, and P stays symmetric positive definite. Velocities
        // and the floor-tied planar height are left alone so the inflation cannot make the track wander.
        var root = Math.Sqrt(_options.RejectionInflationFactor);
        var n = _n;
        Span<double> d = stackalloc double[6];
        d = d[..n];
        d.Fill(1.0);
        d[0] = root;
        d[1] = root;
        d[_planar ? 3 : 2] = root;
        for (var i = 0; i < n; i++)
        {
            for (var j = 0; j < n; j++)
            {
                _p[(i * n) + j] *= d[i] * d[j];
            }
        }
    }

    /// <summary>
    /// Constant velocity: projects a horizontal velocity above <see cref="FilterOptions.MaxPlausibleTagSpeed"/> onto
    /// the bound (estimate projection for an inequality constraint; common practice). Left alone, a weakly observed
    /// track can build up speed and run out of the constellation where the hyperbolas no longer hold it.
    /// </summary>
    private void LimitSpeed()
    {
        var v2 = (_x[3] * _x[3]) + (_x[4] * _x[4]);
        var max = _options.MaxPlausibleTagSpeed;
        if (v2 > max * max)
        {
            var f = max / Math.Sqrt(v2);
            _x[3] *= f;
            _x[4] *= f;
        }
    }

    private void PredictTo(double t)
    {
        var dt = t - _time;
        if (dt > 0)
        {
            Predict(_x, _p, dt, t, mutateAlignment: true);
        }

        if (!(t <= _time))
        {
            _time = t;
        }
    }

    private void Predict(Span<double> x, Span<double> p, double dt, double targetTime, bool mutateAlignment)
    {
        if (!_planar)
        {
            ConstantVelocityModel.PredictInPlace(x, p, dt, _options.HorizontalAccelerationDensity, _options.VerticalAccelerationDensity);
            if (_options.HoldTagHeight)
            {
                // A TDOA-only tag on a ground robot still rides at a known height; without this, weak vertical
                // geometry and NLOS let z wander and drag x, y with it.
                Span<double> hz6 = [0, 0, 1, 0, 0, 0];
                KalmanMath.UpdateScalar(x, p, hz6, _options.FloorHeight + _options.TagLeverArm.Z - x[2], _options.HeightPriorSigma * _options.HeightPriorSigma, 6);
            }

            return;
        }

        var fresh = !double.IsNaN(_odoTime) && targetTime - _odoTime <= _options.OdometryTimeoutSeconds;
        var v = fresh ? _odoV : 0.0;
        var w = fresh ? _odoW : 0.0;
        var verticalDensity = _options.HeightRandomWalk * _options.HeightRandomWalk;
        if (_yawKnown)
        {
            var speedDensity = fresh ? _options.SpeedNoiseDensity : _options.UnknownSpeedNoiseDensity;
            var slip = _options.SlipFraction * v;
            var lateralDensity = fresh ? _options.LateralNoiseDensity : _options.UnknownSpeedNoiseDensity;
            var yawDensity = fresh ? _options.YawRateNoiseDensity : _options.UnknownYawRateNoiseDensity;
            var noise = new PlanarOdometryModel.NoiseDensities(
                (speedDensity * speedDensity) + (slip * slip),
                lateralDensity * lateralDensity,
                yawDensity * yawDensity,
                verticalDensity);
            Span<double> f = stackalloc double[16];
            Span<double> q = stackalloc double[16];
            PlanarOdometryModel.Transition(x, v, w, dt, f);
            PlanarOdometryModel.ProcessNoise(x[3], v, w, dt, noise, q);
            PlanarOdometryModel.Step(x, v, w, dt, x);
            KalmanMath.PredictCovariance(p, f, q, 4);
        }
        else
        {
            // Heading unknown: the tag moves |v| per second in an unknown direction (plus the lever arm swinging
            // with the yaw rate), modelled as a horizontal random walk of that rate.
            var density = fresh ? _options.SpeedNoiseDensity : _options.UnknownSpeedNoiseDensity;
            var swing = w * _lever.HorizontalLength;
            var horizontal = ((density * density) + (v * v) + (swing * swing)) * dt;
            p[0] += horizontal;
            p[5] += horizontal;
            p[10] += verticalDensity * dt;
            if (mutateAlignment)
            {
                if (_alignActive && fresh)
                {
                    Span<double> local = [_alignLocalX, _alignLocalY, 0, _alignLocalYaw];
                    PlanarOdometryModel.Step(local, v, w, dt, local);
                    _alignLocalX = local[0];
                    _alignLocalY = local[1];
                    _alignLocalYaw = local[3];
                }
                else
                {
                    _alignActive = false;
                }
            }
        }

        // Floor-height pseudo-measurement: weak vertical geometry must not drag x, y.
        Span<double> hz = [0, 0, 1, 0];
        var floor = _options.FloorHeight + (_yawKnown ? 0.0 : _lever.Z);
        KalmanMath.UpdateScalar(x, p, hz, floor - x[2], _options.HeightPriorSigma * _options.HeightPriorSigma, 4);
    }

    private void StartAlignment()
    {
        _alignActive = !double.IsNaN(_odoTime) && _time - _odoTime <= _options.OdometryTimeoutSeconds;
        _alignLocalX = 0;
        _alignLocalY = 0;
        _alignLocalYaw = 0;
        _alignStartX = _x[0];
        _alignStartY = _x[1];
        _alignStartVariance = 0.5 * (_p[0] + _p[5]);
    }

    /// <summary>
    /// Heading from motion: with odometry integrated in a local frame since the start point, the tag displacement
    /// in that frame is d_local = p_local + R(θ_local)·L − L and in the site frame d_site = tag_now − tag_start;
    /// the unknown heading offset is ψ₀ = atan2(d_site) − atan2(d_local), and yaw now = ψ₀ + θ_local.
    /// </summary>
    private void TryAlignHeading()
    {
        var varianceNow = 0.5 * (_p[0] + _p[5]);
        var maxVariance = _options.AlignmentMaxSigmaMetres * _options.AlignmentMaxSigmaMetres;

        // Start (or restart) only from a settled position: a displacement that still contains the convergence of a
        // fresh fix, or a drift under many rejections, gives a confidently wrong heading.
        if (!_alignActive || _alignStartVariance > maxVariance || _gatedRun > 0)
        {
            if (varianceNow <= maxVariance && _gatedRun == 0)
            {
                StartAlignment();
            }
            else
            {
                _alignActive = false;
            }

            return;
        }

        double c = Math.Cos(_alignLocalYaw), s = Math.Sin(_alignLocalYaw);
        var dlx = _alignLocalX + (c * _lever.X) - (s * _lever.Y) - _lever.X;
        var dly = _alignLocalY + (s * _lever.X) + (c * _lever.Y) - _lever.Y;
        var dLocal = Math.Sqrt((dlx * dlx) + (dly * dly));
        if (dLocal < _options.YawAlignmentDistanceMetres)
        {
            return;
        }

        var dsx = _x[0] - _alignStartX;
        var dsy = _x[1] - _alignStartY;
        var dSite = Math.Sqrt((dsx * dsx) + (dsy * dsy));
        var positionSigma = Math.Sqrt(_alignStartVariance + varianceNow);
        if (Math.Abs(dSite - dLocal) > (0.3 * dLocal) + (3 * positionSigma) || dSite < 1e-6)
        {
            // Odometry and TDOA disagree about the distance travelled (slip, outliers): start over from here.
            StartAlignment();
            return;
        }

        var yaw = PlanarOdometryModel.WrapAngle(Math.Atan2(dsy, dsx) - Math.Atan2(dly, dlx) + _alignLocalYaw);
        var yawVariance = ((_alignStartVariance + varianceNow) / (dSite * dSite)) + (0.03 * 0.03);

        // Convert the tag state to the reference point: ref = tag − Rz(yaw)·L; J = ∂ref/∂yaw.
        double cy = Math.Cos(yaw), sy = Math.Sin(yaw);
        var jx = (sy * _lever.X) + (cy * _lever.Y);
        var jy = (-cy * _lever.X) + (sy * _lever.Y);
        _x[0] -= (cy * _lever.X) - (sy * _lever.Y);
        _x[1] -= (sy * _lever.X) + (cy * _lever.Y);
        _x[2] -= _lever.Z;
        _x[3] = yaw;
        _p[0] += jx * jx * yawVariance;
        _p[1] += jx * jy * yawVariance;
        _p[4] += jx * jy * yawVariance;
        _p[5] += jy * jy * yawVariance;
        _p[3] = _p[12] = jx * yawVariance;
        _p[7] = _p[13] = jy * yawVariance;
        _p[11] = _p[14] = 0;
        _p[15] = yawVariance;
        _yawKnown = true;
        _alignActive = false;
    }

    private UpdateResult Acquire(in TdoaMeasurement m)
    {
        if (_burstCount > 0)
        {
            var gap = _options.MaxPredictionGapSeconds;
            if (m.Time > _time + gap || m.Time < _time - gap)
            {
                _jumpCount = _jumpCount > 0 && Math.Abs(m.Time - _jumpTime) <= gap ? _jumpCount + 1 : 1;
                _jumpTime = m.Time;
                if (_jumpCount < _options.TimeJumpConfirmCount)
                {
                    return UpdateResult.Reject(m.Time > _time ? RejectionReason.TooFarInFuture : RejectionReason.TooLate);
                }

                _jumpCount = 0;
                _burstCount = 0;
                _burstAttempted = false;
            }
            else
            {
                _jumpCount = 0;
                if (m.Time < _time - _options.InitBurstWindowSeconds)
                {
                    return UpdateResult.Reject(RejectionReason.TooLate);
                }
            }
        }

        // A re-sent sample would count twice in the multilateration fix.
        for (var i = 0; i < _burstCount; i++)
        {
            if (_burst[i].Time == m.Time && _burst[i].AnchorA == m.AnchorA && _burst[i].AnchorB == m.AnchorB)
            {
                return UpdateResult.Reject(RejectionReason.Duplicate);
            }
        }

        if (_burstCount == 0 || m.Time > _time || double.IsNaN(_time))
        {
            _time = m.Time;
        }

        // Drop what fell out of the window; if still full, drop the oldest.
        var keep = 0;
        for (var i = 0; i < _burstCount; i++)
        {
            if (_burst[i].Time >= _time - _options.InitBurstWindowSeconds)
            {
                _burst[keep++] = _burst[i];
            }
        }

        _burstCount = keep;
        if (_burstCount == _burst.Length)
        {
            var oldest = 0;
            for (var i = 1; i < _burstCount; i++)
            {
                if (_burst[i].Time < _burst[oldest].Time)
                {
                    oldest = i;
                }
            }

            _burst[oldest] = m;
        }
        else
        {
            _burst[_burstCount++] = m;
        }

        _burstSinceAttempt++;
        var due = _burstAttempted ? Math.Max(1, _options.InitBurstCount / 2) : 1;
        if (_burstSinceAttempt >= due && (_burstCount >= _options.InitBurstCount || (_burstCount >= Math.Min(_options.InitBurstMinimumCount, _options.InitBurstCount) && BurstSpansWindow())))
        {
            TryInitialise();
        }

        return new UpdateResult(UpdateOutcome.Buffered, RejectionReason.None, 0, double.NaN);
    }

    /// <summary>Whether the buffered burst reaches back (nearly) the whole init window: a slow tag will not send more in time.</summary>
    private bool BurstSpansWindow()
    {
        var oldest = double.PositiveInfinity;
        for (var i = 0; i < _burstCount; i++)
        {
            oldest = Math.Min(oldest, _burst[i].Time);
        }

        return _time - oldest >= 0.8 * _options.InitBurstWindowSeconds;
    }

    /// <summary>First fix from the burst by robust multilateration. Allocates (rare).</summary>
    private void TryInitialise()
    {
        _burstSinceAttempt = 0;
        _burstAttempted = true;
        var burst = _burst.AsSpan(0, _burstCount);
        var options = new MultilaterationOptions
        {
            FixedHeight = _planar ? _options.FloorHeight + _lever.Z : null,
            Kernel = _kernel,
            KernelConstant = _options.KernelConstant,
            SigmaMetres = _options.TdoaSigmaMetres,
        };
        var result = TdoaMultilateration.Solve(_map, burst, options);
        if (result.Converged && _bias is not null)
        {
            var corrected = burst.ToArray();
            for (var i = 0; i < corrected.Length; i++)
            {
                var m = corrected[i];
                if ((uint)m.AnchorA < (uint)_map.Count && (uint)m.AnchorB < (uint)_map.Count)
                {
                    var bias = _bias.PredictTdoaBias(_map, m.AnchorA, m.AnchorB, result.Position, double.NaN);
                    if (double.IsFinite(bias))
                    {
                        corrected[i] = m with { DistanceDifference = m.DistanceDifference - bias };
                    }
                }
            }

            var refined = TdoaMultilateration.Solve(_map, corrected, options);
            if (refined.Converged)
            {
                result = refined;
            }
        }

        if (!result.Converged || !(result.RobustScale <= _options.InitMaxResidualScaleMetres) || !result.Position.IsFinite
            || !(CovarianceMeasures.HorizontalSigma(result.Covariance, 3) <= _options.InitMaxHorizontalSigmaMetres)
            || InlierFraction(burst, result) < _options.InitMinInlierFraction)
        {
            return;
        }

        var oldestTime = double.PositiveInfinity;
        foreach (var m in burst)
        {
            oldestTime = Math.Min(oldestTime, m.Time);
        }

        // The fix is roughly the mid-burst position; the robot may have moved since.
        var fresh = _planar && !double.IsNaN(_odoTime) && _time - _odoTime <= _options.OdometryTimeoutSeconds;
        var speed = fresh ? Math.Abs(_odoV) : _options.InitialVelocitySigma;
        var blur = 0.5 * speed * Math.Max(0, _time - oldestTime);
        var blurVariance = blur * blur;
        var scale = Math.Max(1.0, result.RobustScale / _options.TdoaSigmaMetres);
        var inflate = scale * scale;
        var cov = result.Covariance;

        var time = _time;
        ClearTrack();
        _time = time;
        _x[0] = result.Position.X;
        _x[1] = result.Position.Y;
        _x[2] = result.Position.Z;
        for (var i = 0; i < 2; i++)
        {
            for (var j = 0; j < 2; j++)
            {
                _p[(i * _n) + j] = cov[(i * 3) + j] * inflate;
            }

            _p[(i * _n) + i] += blurVariance + 1e-6;
        }

        if (_planar)
        {
            SetDiagonal(2, _options.HeightPriorSigma * _options.HeightPriorSigma);
            SetDiagonal(3, Math.PI * Math.PI);
            StartAlignment();
        }
        else
        {
            for (var i = 0; i < 3; i++)
            {
                _p[(i * _n) + 2] = cov[(i * 3) + 2] * inflate;
                _p[(2 * _n) + i] = cov[(2 * 3) + i] * inflate;
            }

            _p[(2 * _n) + 2] += blurVariance + 1e-6;
            var vv = _options.InitialVelocitySigma * _options.InitialVelocitySigma;
            SetDiagonal(3, vv);
            SetDiagonal(4, vv);
            SetDiagonal(5, vv);
        }

        KalmanMath.Symmetrize(_p, _n);
        Counters.CountInitialisation();
        SetState(TrackingState.Locked, ReasonFix);
        EvaluateHealth();
    }

    private void SetBounds(AnchorMap map)
    {
        var low = new Vector3D(double.PositiveInfinity, double.PositiveInfinity, double.PositiveInfinity);
        var high = new Vector3D(double.NegativeInfinity, double.NegativeInfinity, double.NegativeInfinity);
        for (var i = 0; i < map.Count; i++)
        {
            var a = map[i].Position;
            low = new Vector3D(Math.Min(low.X, a.X), Math.Min(low.Y, a.Y), Math.Min(low.Z, a.Z));
            high = new Vector3D(Math.Max(high.X, a.X), Math.Max(high.Y, a.Y), Math.Max(high.Z, a.Z));
        }

        var margin = _options.SiteBoundsMarginMetres;
        _boundsLow = new Vector3D(low.X - margin, low.Y - margin, low.Z - margin);
        _boundsHigh = new Vector3D(high.X + margin, high.Y + margin, high.Z + margin);
    }

    private bool InsideBounds() =>
        _x[0] >= _boundsLow.X && _x[0] <= _boundsHigh.X
        && _x[1] >= _boundsLow.Y && _x[1] <= _boundsHigh.Y
        && _x[2] >= _boundsLow.Z && _x[2] <= _boundsHigh.Z;

    /// <summary>
    /// Fraction of the burst within 3 robust sigmas of the fix. A fix that fits a small subset tightly (MAD can be
    /// small when half the burst agrees by chance) is a wrong local solution or an NLOS-dominated one.
    /// </summary>
    private double InlierFraction(ReadOnlySpan<TdoaMeasurement> burst, MultilaterationResult fix)
    {
        var bound = 3 * Math.Max(fix.RobustScale, _options.TdoaSigmaMetres);
        var inliers = 0;
        foreach (var m in burst)
        {
            var a = _map[m.AnchorA];
            var b = _map[m.AnchorB];
            var r = m.DistanceDifference - TdoaMeasurementModel.Predict(fix.Position, a.Position, a.AntennaDelayMetres, b.Position, b.AntennaDelayMetres);
            if (Math.Abs(r) <= bound)
            {
                inliers++;
            }
        }

        return burst.Length == 0 ? 0 : (double)inliers / burst.Length;
    }

    [MethodImpl(MethodImplOptions.AggressiveOptimization)]
    private void EvaluateHealth()
    {
        if (_state == TrackingState.Acquiring)
        {
            return;
        }

        for (var i = 0; i < _n; i++)
        {
            if (!double.IsFinite(_x[i]))
            {
                LoseTrack(ReasonNonFinite);
                return;
            }
        }

        // The diagonal check is cheap and catches what matters every update; the full scan runs now and then.
        _healthCount++;
        if (!KalmanMath.HasUsableDiagonal(_p, _n) || ((_healthCount & FullHealthCheckMask) == 0 && !KalmanMath.IsUsableCovariance(_p, _n)))
        {
            LoseTrack(ReasonNonFinite);
            return;
        }

        if (_map.Count > 0 && !InsideBounds())
        {
            LoseTrack(ReasonOutside);
            return;
        }

        var sigma = CovarianceMeasures.HorizontalSigma(_p, _n);
        if (sigma > _options.DivergenceHorizontalSigmaMetres)
        {
            LoseTrack(ReasonBlowUp);
            return;
        }

        if (_consecutiveRejections >= _options.MaxConsecutiveRejections)
        {
            LoseTrack(ReasonRejections);
            return;
        }

        var ratio = _windowFill >= MinimumWindowForRatio ? RecentRejectionRatio : 0.0;
        if (_state == TrackingState.Locked
            && (sigma > _options.UncertainHorizontalSigmaMetres || ratio > _options.UncertainRejectionRatio))
        {
            SetState(TrackingState.Uncertain, ReasonUncertain);
        }
        else if (_state == TrackingState.Uncertain
            && sigma < 0.8 * _options.UncertainHorizontalSigmaMetres && ratio < 0.8 * _options.UncertainRejectionRatio)
        {
            SetState(TrackingState.Locked, ReasonRecovered);
        }
    }

    private void LoseTrack(string reason)
    {
        SetState(TrackingState.Lost, reason);
        Counters.CountReinitialisation();
        ClearTrack();
        SetState(TrackingState.Acquiring, ReasonReacquire);
    }

    private void ClearTrack()
    {
        Array.Clear(_x);
        Array.Clear(_p);
        _ringCount = 0;
        _ringStart = 0;
        _burstCount = 0;
        _burstAttempted = false;
        _burstSinceAttempt = 0;
        _yawKnown = false;
        _alignActive = false;
        _consecutiveRejections = 0;
        _gatedRun = 0;
        _noiseScale = 1.0;
        _rejectionBits = 0;
        _windowFill = 0;
    }

    private void SetState(TrackingState to, string reason)
    {
        if (_state == to)
        {
            return;
        }

        var from = _state;
        _state = to;
        StateChanged?.Invoke(from, to, reason);
    }

    private void PushWindow(bool rejected)
    {
        _rejectionBits = (_rejectionBits << 1) | (rejected ? 1UL : 0UL);
        if (_windowFill < _options.RejectionWindow)
        {
            _windowFill++;
        }
    }

    private void SetDiagonal(int i, double value) => _p[(i * _n) + i] = value;

    private Vector3D CurrentTagPosition() => _planar && _yawKnown
        ? TdoaMeasurementModel.TagPosition(new Vector3D(_x[0], _x[1], _x[2]), _x[3], _lever)
        : new Vector3D(_x[0], _x[1], _x[2]);

    /// <summary>Robot yaw for the bias model: the planar state's yaw; for constant velocity the velocity heading when moving; NaN when unknown.</summary>
    private double CurrentYawForBias()
    {
        if (_planar)
        {
            return _yawKnown ? _x[3] : double.NaN;
        }

        var speed = Math.Sqrt((_x[3] * _x[3]) + (_x[4] * _x[4]));
        return speed >= HeadingFromVelocityMinSpeed ? Math.Atan2(_x[4], _x[3]) : double.NaN;
    }

    private void FillPose(ReadOnlySpan<double> x, ReadOnlySpan<double> p, double time, PoseEstimate into)
    {
        const int d = PoseEstimate.Dimension;
        var cov = into.Covariance;
        Array.Clear(cov);
        into.Time = time;
        into.State = _state;
        into.RecentRejectionRatio = RecentRejectionRatio;
        if (_state == TrackingState.Acquiring)
        {
            var nan = new Vector3D(double.NaN, double.NaN, double.NaN);
            into.Position = nan;
            into.TagPosition = nan;
            into.Velocity = nan;
            into.Yaw = double.NaN;
            for (var i = 0; i < d; i++)
            {
                cov[(i * d) + i] = PoseEstimate.UnobservedVariance;
            }

            return;
        }

        var n = _n;
        if (!_planar)
        {
            var pos = new Vector3D(x[0], x[1], x[2]);
            into.Position = pos;
            into.TagPosition = pos;
            into.Velocity = new Vector3D(x[3], x[4], x[5]);
            into.Yaw = 0;
            var map = ConstantVelocityToPose;
            for (var i = 0; i < n; i++)
            {
                for (var j = 0; j < n; j++)
                {
                    cov[(map[i] * d) + map[j]] = p[(i * n) + j];
                }
            }

            cov[(3 * d) + 3] = PoseEstimate.UnobservedVariance;
            return;
        }

        var fresh = !double.IsNaN(_odoTime) && time - _odoTime <= _options.OdometryTimeoutSeconds;
        for (var i = 0; i < 4; i++)
        {
            for (var j = 0; j < 4; j++)
            {
                cov[(i * d) + j] = p[(i * n) + j];
            }
        }

        for (var i = 4; i < d; i++)
        {
            cov[(i * d) + i] = PoseEstimate.UnobservedVariance;
        }

        if (_yawKnown)
        {
            var reference = new Vector3D(x[0], x[1], x[2]);
            into.Position = reference;
            into.TagPosition = TdoaMeasurementModel.TagPosition(reference, x[3], _lever);
            into.Yaw = x[3];
            into.Velocity = fresh ? new Vector3D(_odoV * Math.Cos(x[3]), _odoV * Math.Sin(x[3]), 0) : Vector3D.Zero;
        }
        else
        {
            // Heading unknown: the state is the tag; the reference point lies within the lever radius of it.
            var tag = new Vector3D(x[0], x[1], x[2]);
            into.TagPosition = tag;
            into.Position = new Vector3D(x[0], x[1], x[2] - _lever.Z);
            into.Yaw = 0;
            into.Velocity = Vector3D.Zero;
            var lxy = (_lever.X * _lever.X) + (_lever.Y * _lever.Y);
            cov[0] += lxy;
            cov[d + 1] += lxy;
            for (var i = 0; i < 3; i++)
            {
                cov[(i * d) + 3] = 0;
                cov[(3 * d) + i] = 0;
            }

            cov[(3 * d) + 3] = PoseEstimate.UnobservedVariance;
        }
    }

    // ---- rollback ring ----------------------------------------------------------------------------------------

    /// <summary>One recorded event: TDOA (Value1 = raw ddiff) or odometry (Value1 = v, Value2 = w).</summary>
    private readonly record struct RingEvent(double Time, double Value1, double Value2, int AnchorA, int AnchorB, bool IsOdometry);

    private int Physical(int logical) => (_ringStart + logical) % _capacity;

    /// <summary>Saves the current state before an event at logical position <paramref name="logical"/> (0…count); a full ring drops its oldest entry.</summary>
    [MethodImpl(MethodImplOptions.AggressiveOptimization)]
    private void RecordAt(int logical, in RingEvent ev)
    {
        int slot;
        if (logical >= _capacity)
        {
            slot = _ringStart;
            _ringStart = (_ringStart + 1) % _capacity;
        }
        else
        {
            slot = Physical(logical);
            _ringCount = Math.Max(_ringCount, logical + 1);
        }

        _events[slot] = ev;
        var s = _snapshots.AsSpan(slot * _stride, _stride);
        s[0] = _time;
        s[1] = _odoV;
        s[2] = _odoW;
        s[3] = _odoTime;
        s[4] = _yawKnown ? 1 : 0;
        s[5] = _alignActive ? 1 : 0;
        s[6] = _alignLocalX;
        s[7] = _alignLocalY;
        s[8] = _alignLocalYaw;
        s[9] = _alignStartX;
        s[10] = _alignStartY;
        s[11] = _alignStartVariance;
        s[12] = _gatedRun;
        s[13] = _noiseScale;
        var o = HeaderLength;
        for (var i = 0; i < _n; i++)
        {
            s[o++] = _x[i];
        }

        for (var i = 0; i < _n; i++)
        {
            for (var j = i; j < _n; j++)
            {
                s[o++] = _p[(i * _n) + j];
            }
        }
    }

    private void Restore(int slot)
    {
        var s = _snapshots.AsSpan(slot * _stride, _stride);
        _time = s[0];
        _odoV = s[1];
        _odoW = s[2];
        _odoTime = s[3];
        _yawKnown = s[4] != 0;
        _alignActive = s[5] != 0;
        _alignLocalX = s[6];
        _alignLocalY = s[7];
        _alignLocalYaw = s[8];
        _alignStartX = s[9];
        _alignStartY = s[10];
        _alignStartVariance = s[11];
        _gatedRun = (int)s[12];
        _noiseScale = s[13];
        var o = HeaderLength;
        for (var i = 0; i < _n; i++)
        {
            _x[i] = s[o++];
        }

        for (var i = 0; i < _n; i++)
        {
            for (var j = i; j < _n; j++)
            {
                var v = s[o++];
                _p[(i * _n) + j] = v;
                _p[(j * _n) + i] = v;
            }
        }
    }

    /// <summary>
    /// Applies an event older than <see cref="LastTime"/>: restore the state saved before the first later event,
    /// apply the late event, replay the later events (their outcomes are not re-counted). False when the history
    /// does not reach back far enough.
    /// </summary>
    /// <summary>
    /// True when the replay ring already holds a measurement of the same kind, time and anchor pair. Only events at or
    /// after <paramref name="ev"/>'s time are looked at, so in-order data costs one comparison. Older duplicates than
    /// the ring reaches are refused as too late anyway.
    /// </summary>
    private bool HoldsAlready(in RingEvent ev)
    {
        for (var k = _ringCount - 1; k >= 0; k--)
        {
            ref readonly var held = ref _events[Physical(k)];
            if (held.Time < ev.Time)
            {
                return false;
            }

            if (held.Time == ev.Time && held.IsOdometry == ev.IsOdometry && held.AnchorA == ev.AnchorA && held.AnchorB == ev.AnchorB)
            {
                return true;
            }
        }

        return false;
    }

    private bool TryApplyLate(in RingEvent late, out UpdateResult result)
    {
        result = default;
        var count = _ringCount;
        var k = count;
        while (k > 0 && _events[Physical(k - 1)].Time > late.Time)
        {
            k--;
        }

        if (k == count || (k == 0 && _snapshots[Physical(0) * _stride] > late.Time))
        {
            return false;
        }

        Restore(Physical(k));
        var carry = late;
        for (var j = k; ; j++)
        {
            var hasNext = j < count;
            var next = hasNext ? _events[Physical(j)] : default;
            RecordAt(j, carry);
            var r = ApplyEvent(carry);
            if (j == k)
            {
                result = r;
            }

            if (!hasNext)
            {
                break;
            }

            carry = next;
        }

        Counters.CountReordered();
        return true;
    }
}
