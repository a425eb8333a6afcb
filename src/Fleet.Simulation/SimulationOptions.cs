using Fleet.Estimation.Geometry;

namespace Fleet.Simulation;

/// <summary>How each TDOA picks its two anchors among those in range.</summary>
public enum TdoaPairScheme
{
    /// <summary>Two distinct anchors drawn at random.</summary>
    RandomPair,

    /// <summary>Anchor A is the nearest anchor in range (the reference); B is drawn at random among the others.</summary>
    NearestReference,
}

/// <summary>
/// Scenario and error-model settings of <see cref="MeasurementGenerator"/>. Units: seconds, hertz, metres, radians.
/// The defaults describe the "default scenario": harbor-tall, 4 robots for 60 s, with every error source on.
/// </summary>
public sealed record SimulationOptions
{
    /// <summary>Seed of every random draw: the same options give the same records.</summary>
    public int Seed { get; init; } = 1;

    /// <summary>Layout name, one of <see cref="WarehouseSites.Names"/> (ignored when a layout is passed explicitly).</summary>
    public string Layout { get; init; } = WarehouseSites.Tall;

    public int RobotCount { get; init; } = 4;

    public double DurationSeconds { get; init; } = 60.0;

    /// <summary>Mean TDOA rate per robot (Hz); sample times are jittered by ±20 % of the period.</summary>
    public double TdoaRateHz { get; init; } = 75.0;

    public double OdometryRateHz { get; init; } = 20.0;

    public double TruthRateHz { get; init; } = 10.0;

    /// <summary>Names are this prefix plus a two-digit number from 01.</summary>
    public string RobotNamePrefix { get; init; } = "tug-";

    /// <summary>Tag lever arm in the robot body frame (x forward, z up), metres.</summary>
    public Vector3D TagOffset { get; init; } = new(0.1, 0.0, 0.45);

    /// <summary>Cruise speeds are drawn uniformly per robot from [min, max] (m/s).</summary>
    public double MinCruiseSpeed { get; init; } = 0.5;

    public double MaxCruiseSpeed { get; init; } = 1.5;

    /// <summary>Fraction of robots (the last ones) that are TDOA-only tags declared ConstantVelocity3D; they send no odometry.</summary>
    public double ConstantVelocityFraction { get; init; } = 0.25;

    /// <summary>Anchors farther than this from the tag are not heard (m).</summary>
    public double MaxRangeMetres { get; init; } = 35.0;

    /// <summary>
    /// Through-rack attenuation: a link whose segment runs L metres inside racks is heard with probability
    /// exp(−L / this), so deeply blocked anchors mostly drop out of the candidate set. Infinity: no attenuation.
    /// </summary>
    public double RackAttenuationLengthMetres { get; init; } = 1.5;

    public TdoaPairScheme PairScheme { get; init; } = TdoaPairScheme.RandomPair;

    /// <summary>Standard deviation of the Gaussian error of each link (m); a TDOA has √2 times this.</summary>
    public double NoiseSigmaMetres { get; init; } = 0.07;

    /// <summary>Bound of the pose-dependent LOS bias of each link (m); 0 turns it off. See <see cref="LinkBiasFunction"/>.</summary>
    public double BiasAmplitudeMetres { get; init; } = LinkBiasFunction.DefaultAmplitudeMetres;

    /// <summary>Whether links through racks get an NLOS excess delay.</summary>
    public bool NlosEnabled { get; init; } = true;

    /// <summary>NLOS excess = Exp(mean = base) + perMetre · (length inside racks) · LogNormal(0, logSigma), metres.</summary>
    public double NlosBaseExcessMetres { get; init; } = 0.05;

    public double NlosExcessPerMetreInside { get; init; } = 0.15;

    public double NlosLogSigma { get; init; } = 0.5;

    /// <summary>Per-link probability of a multipath outlier: positive excess of min + Exp(mean) metres.</summary>
    public double MultipathOutlierProbability { get; init; } = 0.01;

    public double MultipathMinExcessMetres { get; init; } = 0.3;

    public double MultipathMeanExcessMetres { get; init; } = 0.7;

    /// <summary>Probability that a scheduled TDOA is lost.</summary>
    public double DropoutProbability { get; init; } = 0.02;

    /// <summary>White noise of odometry speed (m/s) and yaw rate (rad/s).</summary>
    public double OdometrySpeedNoise { get; init; } = 0.02;

    public double OdometryYawRateNoise { get; init; } = 0.01;

    /// <summary>Standard deviation of each robot's constant wheel scale error (fraction) and gyro bias (rad/s).</summary>
    public double OdometryScaleErrorSigma { get; init; } = 0.01;

    public double YawRateBiasSigma { get; init; } = 0.002;

    /// <summary>Wheel-slip bursts per minute (Poisson). During a burst the reported speed is too high by a scale drawn from [min, max].</summary>
    public double WheelSlipRatePerMinute { get; init; } = 2.0;

    public double WheelSlipMinScale { get; init; } = 0.1;

    public double WheelSlipMaxScale { get; init; } = 0.4;

    public double WheelSlipMinSeconds { get; init; } = 0.5;

    public double WheelSlipMaxSeconds { get; init; } = 2.0;

    /// <summary>A copy with every random error off (no noise, bias, NLOS, outliers, dropouts, odometry errors).</summary>
    public SimulationOptions NoiseFree() => this with
    {
        NoiseSigmaMetres = 0,
        BiasAmplitudeMetres = 0,
        NlosEnabled = false,
        MultipathOutlierProbability = 0,
        DropoutProbability = 0,
        OdometrySpeedNoise = 0,
        OdometryYawRateNoise = 0,
        OdometryScaleErrorSigma = 0,
        YawRateBiasSigma = 0,
        WheelSlipRatePerMinute = 0,
    };

    /// <summary>Throws <see cref="ArgumentException"/> naming the first invalid setting.</summary>
    public void Validate()
    {
        Require(RobotCount >= 0, nameof(RobotCount), "must be ≥ 0");
        Require(DurationSeconds >= 0 && double.IsFinite(DurationSeconds), nameof(DurationSeconds), "must be finite and ≥ 0");
        Require(TdoaRateHz > 0 && double.IsFinite(TdoaRateHz), nameof(TdoaRateHz), "must be > 0");
        Require(OdometryRateHz > 0 && double.IsFinite(OdometryRateHz), nameof(OdometryRateHz), "must be > 0");
        Require(TruthRateHz > 0 && double.IsFinite(TruthRateHz), nameof(TruthRateHz), "must be > 0");
        Require(MinCruiseSpeed > 0 && MaxCruiseSpeed >= MinCruiseSpeed, nameof(MinCruiseSpeed), "need 0 < min ≤ max");
        Require(ConstantVelocityFraction is >= 0 and <= 1, nameof(ConstantVelocityFraction), "must be in [0, 1]");
        Require(MaxRangeMetres > 0, nameof(MaxRangeMetres), "must be > 0");
        Require(RackAttenuationLengthMetres > 0, nameof(RackAttenuationLengthMetres), "must be > 0 (infinity disables)");
        Require(NoiseSigmaMetres >= 0, nameof(NoiseSigmaMetres), "must be ≥ 0");
        Require(BiasAmplitudeMetres >= 0, nameof(BiasAmplitudeMetres), "must be ≥ 0");
        Require(NlosBaseExcessMetres >= 0 && NlosExcessPerMetreInside >= 0 && NlosLogSigma >= 0, nameof(NlosExcessPerMetreInside), "NLOS parameters must be ≥ 0");
        Require(MultipathOutlierProbability is >= 0 and <= 1, nameof(MultipathOutlierProbability), "must be in [0, 1]");
        Require(MultipathMinExcessMetres >= 0 && MultipathMeanExcessMetres >= 0, nameof(MultipathMeanExcessMetres), "must be ≥ 0");
        Require(DropoutProbability is >= 0 and < 1, nameof(DropoutProbability), "must be in [0, 1)");
        Require(OdometrySpeedNoise >= 0 && OdometryYawRateNoise >= 0 && OdometryScaleErrorSigma >= 0 && YawRateBiasSigma >= 0, nameof(OdometrySpeedNoise), "odometry noise must be ≥ 0");
        Require(WheelSlipRatePerMinute >= 0, nameof(WheelSlipRatePerMinute), "must be ≥ 0");
        Require(WheelSlipMaxScale >= WheelSlipMinScale && WheelSlipMaxSeconds >= WheelSlipMinSeconds && WheelSlipMinSeconds > 0, nameof(WheelSlipMinScale), "need min ≤ max and durations > 0");
        Require(TagOffset.IsFinite, nameof(TagOffset), "must be finite");
    }

    private static void Require(bool condition, string name, string message)
    {
        if (!condition)
        {
            throw new ArgumentException($"{name} {message}", name);
        }
    }
}
