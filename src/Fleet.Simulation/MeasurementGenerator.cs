using Fleet.Estimation.Anchors;
using Fleet.Estimation.Filtering;
using Fleet.Estimation.Geometry;
using Fleet.Estimation.Measurements;

namespace Fleet.Simulation;

/// <summary>
/// What went into one generated TDOA (for tests and evaluation; not written to logs). Every error term is that of
/// ddiff = |p − b| − |p − a|, i.e. link B's term minus link A's term, in metres; the NLOS excess of each link
/// (≥ 0) and the length of each link's segment inside racks are given separately.
/// </summary>
public sealed record GeneratedTdoaInfo(
    double TrueDistanceDifference,
    double BiasMetres,
    double NoiseMetres,
    double NlosExcessA,
    double NlosExcessB,
    double MultipathExcessMetres,
    bool IsNlos,
    bool IsMultipathOutlier,
    double RackLengthA,
    double RackLengthB,
    Vector3D TagPosition,
    double Yaw)
{
    /// <summary>NLOS part of the TDOA error: <see cref="NlosExcessB"/> − <see cref="NlosExcessA"/> (m).</summary>
    public double NlosExcessMetres => NlosExcessB - NlosExcessA;
}

/// <summary>One generated record and, for TDOA records, how it was made.</summary>
public readonly record struct GeneratedObservation(ObservationRecord Record, GeneratedTdoaInfo? Tdoa);

/// <summary>
/// Seeded generator of a measurement stream for robots driving aisle loops in a <see cref="SiteLayout"/>.
/// Output: one <see cref="RobotRecord"/> per robot, then TDOA, odometry and truth records of all robots merged in
/// time order (ties: robot index, then truth, odometry, TDOA). Each link range is
/// true distance + Gaussian noise + <see cref="LinkBiasFunction"/> bias + NLOS excess (when the anchor–tag segment
/// crosses a rack) + occasional multipath outlier; a TDOA is the difference of its two links.
/// Streams in constant memory for any duration. The same options give identical records; the noise-free copy
/// (<see cref="SimulationOptions.NoiseFree"/>) of an options set has the same times, anchor pairs and trajectories.
/// </summary>
public sealed class MeasurementGenerator
{
    private readonly RobotRecord[] _robots;

    public MeasurementGenerator(SimulationOptions options)
        : this(options, WarehouseSites.Build(options.Layout))
    {
    }

    public MeasurementGenerator(SimulationOptions options, SiteLayout layout)
    {
        ArgumentNullException.ThrowIfNull(options);
        ArgumentNullException.ThrowIfNull(layout);
        options.Validate();
        Options = options;
        Layout = layout;
        Bias = new LinkBiasFunction(options.BiasAmplitudeMetres);

        var cvCount = (int)Math.Round(options.ConstantVelocityFraction * options.RobotCount);
        _robots = new RobotRecord[options.RobotCount];
        for (var i = 0; i < options.RobotCount; i++)
        {
            var motion = i >= options.RobotCount - cvCount ? MotionModelKind.ConstantVelocity3D : MotionModelKind.PlanarOdometry;
            _robots[i] = new RobotRecord(RobotName(options.RobotNamePrefix, i), options.TagOffset, motion);
        }
    }

    public SimulationOptions Options { get; }

    public SiteLayout Layout { get; }

    /// <summary>The ground-truth link bias used (amplitude from the options).</summary>
    public LinkBiasFunction Bias { get; }

    /// <summary>The robots, in the order their records are emitted.</summary>
    public IReadOnlyList<RobotRecord> Robots => _robots;

    /// <summary>Robot name for index i (0-based): prefix + two-digit number from 01.</summary>
    public static string RobotName(string prefix, int index) => prefix + (index + 1).ToString("00", System.Globalization.CultureInfo.InvariantCulture);

    /// <summary>Total length (m) of the segment <paramref name="from"/>→<paramref name="to"/> inside the racks.</summary>
    public static double LengthInsideRacks(IReadOnlyList<AxisAlignedBox> racks, Vector3D from, Vector3D to)
    {
        var total = 0.0;
        for (var i = 0; i < racks.Count; i++)
        {
            total += racks[i].SegmentLengthInside(from, to);
        }

        return total;
    }

    /// <summary>The record stream (what a log holds).</summary>
    public IEnumerable<ObservationRecord> Generate()
    {
        foreach (var item in GenerateDetailed())
        {
            yield return item.Record;
        }
    }

    /// <summary>The record stream with the make-up of each TDOA.</summary>
    public IEnumerable<GeneratedObservation> GenerateDetailed()
    {
        foreach (var robot in _robots)
        {
            yield return new GeneratedObservation(robot, null);
        }

        var queue = new PriorityQueue<RobotStream, (double Time, int Index)>();
        for (var i = 0; i < _robots.Length; i++)
        {
            var stream = new RobotStream(this, i);
            if (stream.Advance())
            {
                queue.Enqueue(stream, (stream.PendingTime, i));
            }
        }

        while (queue.TryDequeue(out var stream, out _))
        {
            yield return stream.Pending;
            if (stream.Advance())
            {
                queue.Enqueue(stream, (stream.PendingTime, stream.Index));
            }
        }
    }

    // Deterministic, well-mixed seeds for independent random streams (SplitMix64 finaliser).
    internal static int DeriveSeed(int seed, int robot, int stream)
    {
        var z = unchecked(((ulong)(uint)seed * 0x9E3779B97F4A7C15UL) + ((ulong)(robot + 1) * 0xBF58476D1CE4E5B9UL) + ((ulong)(stream + 1) * 0x94D049BB133111EBUL));
        z = unchecked((z ^ (z >> 30)) * 0xBF58476D1CE4E5B9UL);
        z = unchecked((z ^ (z >> 27)) * 0x94D049BB133111EBUL);
        z ^= z >> 31;
        return (int)(z & 0x7FFFFFFF);
    }

    /// <summary>Standard normal draw by Box–Muller; always uses exactly two uniforms so draw counts stay fixed.</summary>
    internal static double Gaussian(Random random)
    {
        var u1 = 1.0 - random.NextDouble();
        var u2 = random.NextDouble();
        return Math.Sqrt(-2.0 * Math.Log(u1)) * Math.Cos(2.0 * Math.PI * u2);
    }

    /// <summary>Exponential draw with the given mean; one uniform.</summary>
    internal static double Exponential(Random random, double mean) => -mean * Math.Log(1.0 - random.NextDouble());

    /// <summary>One robot's records in time order, one record of lookahead.</summary>
    private sealed class RobotStream
    {
        private const int KindTruth = 0;
        private const int KindOdometry = 1;
        private const int KindTdoa = 2;

        private readonly MeasurementGenerator _owner;
        private readonly SimulationOptions _o;
        private readonly RobotRecord _robot;
        private readonly RobotDriver _driver;
        private readonly Random _tdoaRandom;
        private readonly Random _odometryRandom;
        private readonly int[] _inRange;
        private readonly double[] _rackLength;
        private readonly double _tdoaPeriod;
        private readonly double _tdoaPhase;
        private readonly double _odometryPhase;
        private readonly double _truthPhase;
        private readonly double _scaleError;
        private readonly double _yawRateBias;
        private long _tdoaCount;
        private long _odometryCount;
        private long _truthCount;
        private double _nextTdoa;
        private double _nextOdometry;
        private double _nextTruth;
        private double _slipUntil = double.NegativeInfinity;
        private double _slipScale;
        private double _nextSlipStart = double.PositiveInfinity;

        public RobotStream(MeasurementGenerator owner, int index)
        {
            _owner = owner;
            _o = owner.Options;
            Index = index;
            _robot = owner._robots[index];

            var routeRandom = new Random(DeriveSeed(_o.Seed, index, 0));
            var route = AisleRoute.CreateRandom(routeRandom);
            var cruise = _o.MinCruiseSpeed + (routeRandom.NextDouble() * (_o.MaxCruiseSpeed - _o.MinCruiseSpeed));
            _driver = new RobotDriver(route, new DrivingProfile(CruiseSpeed: cruise), routeRandom);

            _tdoaRandom = new Random(DeriveSeed(_o.Seed, index, 1));
            _odometryRandom = new Random(DeriveSeed(_o.Seed, index, 2));
            _inRange = new int[owner.Layout.Anchors.Count];
            _rackLength = new double[owner.Layout.Anchors.Count];

            _tdoaPeriod = 1.0 / _o.TdoaRateHz;
            _tdoaPhase = _tdoaRandom.NextDouble() * _tdoaPeriod;
            _odometryPhase = _odometryRandom.NextDouble() / _o.OdometryRateHz;
            _truthPhase = routeRandom.NextDouble() / _o.TruthRateHz;
            _scaleError = _o.OdometryScaleErrorSigma * Gaussian(_odometryRandom);
            _yawRateBias = _o.YawRateBiasSigma * Gaussian(_odometryRandom);
            if (_o.WheelSlipRatePerMinute > 0)
            {
                _nextSlipStart = Exponential(_odometryRandom, 60.0 / _o.WheelSlipRatePerMinute);
            }

            _nextTruth = _truthPhase;
            _nextOdometry = _robot.Motion == MotionModelKind.PlanarOdometry ? _odometryPhase : double.PositiveInfinity;
            _nextTdoa = NextTdoaTime();
        }

        public int Index { get; }

        public GeneratedObservation Pending { get; private set; }

        public double PendingTime { get; private set; }

        /// <summary>Makes the next record pending; false when the robot's stream has ended.</summary>
        public bool Advance()
        {
            while (true)
            {
                var kind = KindTruth;
                var t = _nextTruth;
                if (_nextOdometry < t)
                {
                    kind = KindOdometry;
                    t = _nextOdometry;
                }

                if (_nextTdoa < t)
                {
                    kind = KindTdoa;
                    t = _nextTdoa;
                }

                if (!(t <= _o.DurationSeconds))
                {
                    return false;
                }

                var state = _driver.StateAt(t);
                switch (kind)
                {
                    case KindTruth:
                        _truthCount++;
                        _nextTruth = _truthPhase + (_truthCount / _o.TruthRateHz);
                        Set(t, new GeneratedObservation(new TruthRecord(t, _robot.Robot, state.TagPosition(_o.TagOffset), state.Yaw), null));
                        return true;
                    case KindOdometry:
                        _odometryCount++;
                        _nextOdometry = _odometryPhase + (_odometryCount / _o.OdometryRateHz);
                        Set(t, new GeneratedObservation(MakeOdometry(t, state), null));
                        return true;
                    default:
                        _nextTdoa = NextTdoaTime();
                        var tdoa = MakeTdoa(t, state);
                        if (tdoa.Record is not null)
                        {
                            Set(t, tdoa);
                            return true;
                        }

                        break;
                }
            }
        }

        private void Set(double t, GeneratedObservation observation)
        {
            Pending = observation;
            PendingTime = t;
        }

        private double NextTdoaTime()
        {
            // Jitter of ±20 % of the period keeps the times increasing.
            var jitter = (_tdoaRandom.NextDouble() - 0.5) * 0.4 * _tdoaPeriod;
            var t = _tdoaPhase + (_tdoaCount * _tdoaPeriod) + jitter;
            _tdoaCount++;
            return Math.Max(t, 0.0);
        }

        private OdometryRecord MakeOdometry(double t, RobotState state)
        {
            var r = _odometryRandom;
            if (t >= _nextSlipStart)
            {
                _slipUntil = t + _o.WheelSlipMinSeconds + (r.NextDouble() * (_o.WheelSlipMaxSeconds - _o.WheelSlipMinSeconds));
                _slipScale = _o.WheelSlipMinScale + (r.NextDouble() * (_o.WheelSlipMaxScale - _o.WheelSlipMinScale));
                _nextSlipStart = _slipUntil + Exponential(r, 60.0 / _o.WheelSlipRatePerMinute);
            }

            // Slip: the wheels turn faster than the robot moves, so odometry over-reports the speed.
            var slip = t < _slipUntil ? _slipScale : 0.0;
            var v = (state.Speed * (1.0 + _scaleError + slip)) + (_o.OdometrySpeedNoise * Gaussian(r));
            var w = state.YawRate + _yawRateBias + (_o.OdometryYawRateNoise * Gaussian(r));
            return new OdometryRecord(t, _robot.Robot, v, w);
        }

        private GeneratedObservation MakeTdoa(double t, RobotState state)
        {
            var r = _tdoaRandom;
            var map = _owner.Layout.Anchors;
            var tag = state.TagPosition(_o.TagOffset);

            // Fixed number of draws per scheduled TDOA, whatever the settings (see class remarks).
            var dropped = r.NextDouble() < _o.DropoutProbability;
            var pick1 = r.NextDouble();
            var pick2 = r.NextDouble();
            var linkA = DrawLink(r);
            var linkB = DrawLink(r);

            var n = 0;
            var nearest = -1;
            var nearestDistance = double.PositiveInfinity;
            for (var i = 0; i < map.Count; i++)
            {
                var d = Vector3D.Distance(map[i].Position, tag);
                var heard = r.NextDouble();
                var inside = LengthInsideRacks(_owner.Layout.Racks, map[i].Position, tag);
                _rackLength[i] = inside;
                if (d <= _o.MaxRangeMetres && heard < Math.Exp(-inside / _o.RackAttenuationLengthMetres))
                {
                    _inRange[n++] = i;
                    if (d < nearestDistance)
                    {
                        nearestDistance = d;
                        nearest = n - 1;
                    }
                }
            }

            if (dropped || n < 2)
            {
                return default;
            }

            int ia, ib;
            if (_o.PairScheme == TdoaPairScheme.NearestReference)
            {
                ia = nearest;
                ib = (int)(pick2 * (n - 1));
                if (ib >= ia)
                {
                    ib++;
                }
            }
            else
            {
                ia = (int)(pick1 * n);
                ib = (int)(pick2 * (n - 1));
                if (ib >= ia)
                {
                    ib++;
                }
            }

            var anchorA = map[_inRange[ia]];
            var anchorB = map[_inRange[ib]];
            var a = LinkError(anchorA, _rackLength[_inRange[ia]], tag, state.Yaw, linkA);
            var b = LinkError(anchorB, _rackLength[_inRange[ib]], tag, state.Yaw, linkB);

            var trueDiff = Vector3D.Distance(tag, anchorB.Position) - Vector3D.Distance(tag, anchorA.Position);
            var ddiff = trueDiff + b.Total - a.Total;
            var info = new GeneratedTdoaInfo(
                trueDiff,
                b.Bias - a.Bias,
                b.Noise - a.Noise,
                a.Nlos,
                b.Nlos,
                b.Multipath - a.Multipath,
                a.Nlos > 0 || b.Nlos > 0,
                a.Multipath > 0 || b.Multipath > 0,
                a.RackLength,
                b.RackLength,
                tag,
                state.Yaw);
            return new GeneratedObservation(new TdoaRecord(t, _robot.Robot, anchorA.Id, anchorB.Id, ddiff), info);
        }

        private LinkDraws DrawLink(Random r) => new(
            Gaussian(r),
            Exponential(r, 1.0),
            Gaussian(r),
            r.NextDouble(),
            Exponential(r, 1.0));

        private LinkError LinkError(Anchor anchor, double length, Vector3D tag, double yaw, LinkDraws draws)
        {
            var noise = _o.NoiseSigmaMetres * draws.Gaussian;
            var bias = _owner.Bias.Evaluate(anchor, tag, yaw);
            var nlos = 0.0;
            if (_o.NlosEnabled && length > 0)
            {
                nlos = (_o.NlosBaseExcessMetres * draws.NlosExponential)
                    + (_o.NlosExcessPerMetreInside * length * Math.Exp(_o.NlosLogSigma * draws.NlosGaussian));

                // A zero base and zero per-metre scale would make the "always positive" excess vanish; keep it marked.
                nlos = Math.Max(nlos, double.Epsilon);
            }

            var multipath = draws.MultipathUniform < _o.MultipathOutlierProbability
                ? _o.MultipathMinExcessMetres + (_o.MultipathMeanExcessMetres * draws.MultipathExponential)
                : 0.0;
            return new LinkError(noise, bias, nlos, multipath, length);
        }
    }

    private readonly record struct LinkDraws(double Gaussian, double NlosExponential, double NlosGaussian, double MultipathUniform, double MultipathExponential);

    private readonly record struct LinkError(double Noise, double Bias, double Nlos, double Multipath, double RackLength)
    {
        public double Total => Noise + Bias + Nlos + Multipath;
    }
}
