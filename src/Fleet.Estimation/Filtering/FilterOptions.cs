using Fleet.Estimation.Geometry;
using MathNet.Numerics.Distributions;

namespace Fleet.Estimation.Filtering;

/// <summary>
/// Settings of one robot's <see cref="RobotFilter"/>. Immutable after construction (init-only); the filter calls
/// <see cref="Validate"/> and caches derived values (gate threshold, kernel constant) once.
/// Units: metres, seconds, radians; noise densities as stated per property.
/// </summary>
public sealed class FilterOptions
{
    /// <summary>Process model. Default <see cref="MotionModelKind.PlanarOdometry"/>.</summary>
    public MotionModelKind Motion { get; init; } = MotionModelKind.PlanarOdometry;

    /// <summary>M-estimator of the measurement update. Default Huber.</summary>
    public RobustKernel Kernel { get; init; } = RobustKernel.Huber;

    /// <summary>Tuning constant c of <see cref="Kernel"/>; null uses the 95 %-efficiency constant (<see cref="RobustKernels"/>).</summary>
    public double? KernelConstant { get; init; }

    /// <summary>Standard deviation of one TDOA value (m). Default 0.1.</summary>
    public double TdoaSigmaMetres { get; init; } = 0.1;

    /// <summary>Reject measurements whose prior NIS exceeds the χ²(1) quantile at <see cref="GateProbability"/>.</summary>
    public bool GateEnabled { get; init; } = true;

    /// <summary>Probability of the χ²(1) gate, in (0, 1). Default 0.999 (threshold ≈ 10.83).</summary>
    public double GateProbability { get; init; } = 0.999;

    /// <summary>
    /// Robust kernels only: scale the TDOA variance by k² ≥ 1 where k tracks the running median of the standardised
    /// innovations, so dense NLOS widens the gate and the weights instead of locking the data out. Default true.
    /// </summary>
    public bool AdaptiveNoise { get; init; } = true;

    /// <summary>Log-step of the adaptive noise scale per measurement (time constant ≈ 1/rate measurements). Default 0.05.</summary>
    public double NoiseScaleRate { get; init; } = 0.05;

    /// <summary>Upper bound of the adaptive noise scale k. Default 10.</summary>
    public double MaxNoiseScale { get; init; } = 10.0;

    /// <summary>Maximum reweighting/relinearisation iterations of one robust update (≥ 1). Default 5.</summary>
    public int MaxIrlsIterations { get; init; } = 5;

    /// <summary>Out-of-order events up to this age (s) behind the newest applied event are applied exactly by rollback. Default 0.1.</summary>
    public double ReorderLagSeconds { get; init; } = 0.1;

    /// <summary>Number of recent events kept for rollback (2–64). Default 16.</summary>
    public int ReorderCapacity { get; init; } = 16;

    /// <summary>
    /// A silence longer than this (s) is not bridged by prediction: the filter re-acquires. Default 5.
    /// Also bounds plausible time jumps (see <see cref="TimeJumpConfirmCount"/>).
    /// </summary>
    public double MaxPredictionGapSeconds { get; init; } = 5.0;

    /// <summary>
    /// Consecutive, mutually consistent events this far outside [LastTime − gap, LastTime + gap] needed before the
    /// filter accepts a time discontinuity and re-acquires; stray timestamps are rejected. Default 3 (a real
    /// discontinuity arrives as a stream, so this costs two measurements; two stray stamps in a row are not believed).
    /// </summary>
    public int TimeJumpConfirmCount { get; init; } = 3;

    /// <summary>Tag offset from the robot reference point in the body frame (x forward, z up; m). Planar model only.</summary>
    public Vector3D TagLeverArm { get; init; } = Vector3D.Zero;

    /// <summary>Height of the floor (site z, m) on which the reference point rides (planar model).</summary>
    public double FloorHeight { get; init; }

    /// <summary>Sigma (m) of the floor-height pseudo-measurement applied at each prediction (planar). Default 0.02; larger relaxes it for ramps.</summary>
    public double HeightPriorSigma { get; init; } = 0.02;

    /// <summary>Random-walk density of the reference height (m/√s), keeps P well conditioned (planar). Default 0.01.</summary>
    public double HeightRandomWalk { get; init; } = 0.01;

    /// <summary>White-acceleration spectral density q for x and y (m²/s³), constant-velocity model. Default 1.</summary>
    public double HorizontalAccelerationDensity { get; init; } = 1.0;

    /// <summary>White-acceleration spectral density q for z (m²/s³), constant-velocity model. Default 0.05.</summary>
    public double VerticalAccelerationDensity { get; init; } = 0.05;

    /// <summary>Initial velocity sigma (m/s) after a fix (constant-velocity model); also bounds motion blur of the init burst. Default 1.5.</summary>
    public double InitialVelocitySigma { get; init; } = 1.5;

    /// <summary>Odometry older than this (s) is stale: speed and yaw rate are treated as unknown. Default 0.5.</summary>
    public double OdometryTimeoutSeconds { get; init; } = 0.5;

    /// <summary>Along-track speed noise density (m/√s): position variance grows by this² per second. Default 0.05.</summary>
    public double SpeedNoiseDensity { get; init; } = 0.05;

    /// <summary>Lateral (side-slip) noise density (m/√s). Default 0.02.</summary>
    public double LateralNoiseDensity { get; init; } = 0.02;

    /// <summary>Yaw-rate noise density (rad/√s). Default 0.02.</summary>
    public double YawRateNoiseDensity { get; init; } = 0.02;

    /// <summary>Wheel-slip term: extra along-track density SlipFraction·|v| (√s). Default 0.05.</summary>
    public double SlipFraction { get; init; } = 0.05;

    /// <summary>Along/lateral noise density (m/√s) when odometry is stale or absent. Default 1.</summary>
    public double UnknownSpeedNoiseDensity { get; init; } = 1.0;

    /// <summary>Yaw-rate noise density (rad/√s) when odometry is stale or absent. Default 0.5.</summary>
    public double UnknownYawRateNoiseDensity { get; init; } = 0.5;

    /// <summary>Odometry speeds above this (m/s) are rejected as impossible. Default 10.</summary>
    public double MaxPlausibleSpeed { get; init; } = 10.0;

    /// <summary>
    /// Constant-velocity model: largest plausible horizontal tag speed (m/s). A faster estimate is projected back onto
    /// this bound (the data cannot support it; left alone it lets a weakly observed track run away). Default 4.
    /// </summary>
    public double MaxPlausibleTagSpeed { get; init; } = 4.0;

    /// <summary>
    /// A tag estimate farther than this (m) outside the bounding box of the anchors is divergence: TDOA
    /// hyperbolas flatten outside the constellation, so such a track cannot recover by itself. Default 10.
    /// </summary>
    public double SiteBoundsMarginMetres { get; init; } = 10.0;

    /// <summary>
    /// Planar heading alignment starts only when the horizontal 1-σ is below this (m): a heading taken from a
    /// displacement that still contains the convergence of a fresh fix is wrong. Default 0.25.
    /// </summary>
    public double AlignmentMaxSigmaMetres { get; init; } = 0.25;

    /// <summary>Odometry yaw rates above this (rad/s) are rejected as impossible. Default 10.</summary>
    public double MaxPlausibleYawRate { get; init; } = 10.0;

    /// <summary>
    /// Planar model without a known heading: the heading is taken from the tag displacement against the odometry
    /// path once the robot has moved this far (m). Default 1.5.
    /// </summary>
    public double YawAlignmentDistanceMetres { get; init; } = 1.5;

    /// <summary>A seeded yaw with sigma above this (rad) is treated as unknown (planar). Default 0.35.</summary>
    public double MaxAlignedYawSigma { get; init; } = 0.35;

    /// <summary>
    /// TDOAs collected before a first fix is attempted (≥ 3). Default 24 (about 0.3 s at 75 Hz): a short burst lets a
    /// few late reflections outvote the rest and lock the track metres off.
    /// </summary>
    public int InitBurstCount { get; init; } = 24;

    /// <summary>
    /// Slow tags: once the burst spans the whole <see cref="InitBurstWindowSeconds"/>, a fix is attempted with this many
    /// TDOAs (≥ 3; capped at <see cref="InitBurstCount"/>) even if <see cref="InitBurstCount"/> is not reached. Default 10.
    /// </summary>
    public int InitBurstMinimumCount { get; init; } = 10;

    /// <summary>Capacity of the initialisation buffer (≥ <see cref="InitBurstCount"/>; a full buffer drops its oldest). Default 32.</summary>
    public int InitBurstCapacity { get; init; } = 32;

    /// <summary>Only TDOAs within this window (s) of the newest one are used for a fix. Default 0.5.</summary>
    public double InitBurstWindowSeconds { get; init; } = 0.5;

    /// <summary>A fix is accepted only if the robust residual scale is at most this (m). Default 0.5.</summary>
    public double InitMaxResidualScaleMetres { get; init; } = 0.5;

    /// <summary>
    /// A fix is accepted only if at least this fraction of the burst fits it within 3 robust sigmas, so a solution
    /// that explains only an NLOS-contaminated subset is refused. Default 0.6.
    /// </summary>
    public double InitMinInlierFraction { get; init; } = 0.6;

    /// <summary>A fix is accepted only if its horizontal 1-σ is at most this (m). Default 1.</summary>
    public double InitMaxHorizontalSigmaMetres { get; init; } = 1.0;

    /// <summary>Horizontal 1-σ (m) above which the track is reported <see cref="TrackingState.Uncertain"/>. Default 0.5.</summary>
    public double UncertainHorizontalSigmaMetres { get; init; } = 0.5;

    /// <summary>Recent rejection ratio above which the track is reported <see cref="TrackingState.Uncertain"/>. Default 0.5.</summary>
    public double UncertainRejectionRatio { get; init; } = 0.5;

    /// <summary>Number of recent TDOAs in the rejection-ratio window (1–64). Default 32.</summary>
    public int RejectionWindow { get; init; } = 32;

    /// <summary>This many consecutive gate/zero-weight rejections declare divergence (re-acquire). Default 30.</summary>
    public int MaxConsecutiveRejections { get; init; } = 30;

    /// <summary>Consecutive gate/zero-weight rejections tolerated before each further one inflates the covariance (≥ 0). Default 3.</summary>
    public int RejectionRunBeforeInflation { get; init; } = 3;

    /// <summary>Factor (≥ 1) by which the position (and planar yaw) variances grow on each rejection beyond <see cref="RejectionRunBeforeInflation"/>. Default 1.2.</summary>
    public double RejectionInflationFactor { get; init; } = 1.2;

    /// <summary>Horizontal 1-σ (m) beyond which the covariance is considered blown up (re-acquire). Default 25.</summary>
    public double DivergenceHorizontalSigmaMetres { get; init; } = 25.0;

    /// <summary>Margin (m) over the anchor baseline beyond which a ddiff is impossible. Default 0.5.</summary>
    public double ImpossibleValueMarginMetres { get; init; } = 0.5;

    /// <summary>
    /// Constant-velocity model only: the tag rides a ground robot, so hold its height at
    /// <see cref="FloorHeight"/> + <see cref="TagLeverArm"/>.Z with <see cref="HeightPriorSigma"/> (the planar model always
    /// does). Turn off for tags that change height (lift masts, handhelds).
    /// </summary>
    public bool HoldTagHeight { get; init; }

    /// <summary>The kernel constant in use: <see cref="KernelConstant"/> or the standard one.</summary>
    public double EffectiveKernelConstant => KernelConstant ?? RobustKernels.StandardConstant(Kernel);

    /// <summary>Gate threshold on the prior NIS: χ²₁ quantile at <see cref="GateProbability"/> (MathNet <c>ChiSquared.InvCDF</c>).</summary>
    public double GateThreshold => ChiSquared.InvCDF(1, GateProbability);

    /// <summary>Throws <see cref="ArgumentException"/> naming the first invalid setting.</summary>
    public void Validate()
    {
        Positive(TdoaSigmaMetres, nameof(TdoaSigmaMetres));
        if (!(GateProbability > 0 && GateProbability < 1))
        {
            throw new ArgumentOutOfRangeException(nameof(GateProbability), GateProbability, "gate probability must be in (0, 1)");
        }

        if (KernelConstant is { } c && !(c > 0 && double.IsFinite(c)))
        {
            throw new ArgumentOutOfRangeException(nameof(KernelConstant), c, "kernel constant must be positive and finite");
        }

        Range(MaxIrlsIterations, 1, 50, nameof(MaxIrlsIterations));
        if (!(NoiseScaleRate > 0 && NoiseScaleRate <= 1))
        {
            throw new ArgumentOutOfRangeException(nameof(NoiseScaleRate), NoiseScaleRate, "must be in (0, 1]");
        }

        if (!(MaxNoiseScale >= 1 && double.IsFinite(MaxNoiseScale)))
        {
            throw new ArgumentOutOfRangeException(nameof(MaxNoiseScale), MaxNoiseScale, "must be finite and ≥ 1");
        }

        NonNegative(ReorderLagSeconds, nameof(ReorderLagSeconds));
        Range(ReorderCapacity, 2, 64, nameof(ReorderCapacity));
        Positive(MaxPredictionGapSeconds, nameof(MaxPredictionGapSeconds));
        if (MaxPredictionGapSeconds <= ReorderLagSeconds)
        {
            throw new ArgumentException($"{nameof(MaxPredictionGapSeconds)} must exceed {nameof(ReorderLagSeconds)}", nameof(MaxPredictionGapSeconds));
        }

        Range(TimeJumpConfirmCount, 1, 100, nameof(TimeJumpConfirmCount));
        if (!TagLeverArm.IsFinite || TagLeverArm.Length > 10)
        {
            throw new ArgumentOutOfRangeException(nameof(TagLeverArm), TagLeverArm, "lever arm must be finite and shorter than 10 m");
        }

        Finite(FloorHeight, nameof(FloorHeight));
        Positive(HeightPriorSigma, nameof(HeightPriorSigma));
        Positive(HeightRandomWalk, nameof(HeightRandomWalk));
        Positive(HorizontalAccelerationDensity, nameof(HorizontalAccelerationDensity));
        Positive(VerticalAccelerationDensity, nameof(VerticalAccelerationDensity));
        Positive(InitialVelocitySigma, nameof(InitialVelocitySigma));
        Positive(OdometryTimeoutSeconds, nameof(OdometryTimeoutSeconds));
        Positive(SpeedNoiseDensity, nameof(SpeedNoiseDensity));
        Positive(LateralNoiseDensity, nameof(LateralNoiseDensity));
        Positive(YawRateNoiseDensity, nameof(YawRateNoiseDensity));
        NonNegative(SlipFraction, nameof(SlipFraction));
        Positive(UnknownSpeedNoiseDensity, nameof(UnknownSpeedNoiseDensity));
        Positive(UnknownYawRateNoiseDensity, nameof(UnknownYawRateNoiseDensity));
        Positive(MaxPlausibleSpeed, nameof(MaxPlausibleSpeed));
        Positive(MaxPlausibleYawRate, nameof(MaxPlausibleYawRate));
        Positive(MaxPlausibleTagSpeed, nameof(MaxPlausibleTagSpeed));
        Positive(SiteBoundsMarginMetres, nameof(SiteBoundsMarginMetres));
        Positive(AlignmentMaxSigmaMetres, nameof(AlignmentMaxSigmaMetres));
        Positive(YawAlignmentDistanceMetres, nameof(YawAlignmentDistanceMetres));
        Positive(MaxAlignedYawSigma, nameof(MaxAlignedYawSigma));
        Range(InitBurstCount, 3, 1000, nameof(InitBurstCount));
        Range(InitBurstMinimumCount, 3, 1000, nameof(InitBurstMinimumCount));
        if (InitBurstCapacity < InitBurstCount || InitBurstCapacity > 1000)
        {
            throw new ArgumentOutOfRangeException(nameof(InitBurstCapacity), InitBurstCapacity, $"must be between {nameof(InitBurstCount)} and 1000");
        }

        Positive(InitBurstWindowSeconds, nameof(InitBurstWindowSeconds));
        Positive(InitMaxResidualScaleMetres, nameof(InitMaxResidualScaleMetres));
        if (!(InitMinInlierFraction >= 0 && InitMinInlierFraction <= 1))
        {
            throw new ArgumentOutOfRangeException(nameof(InitMinInlierFraction), InitMinInlierFraction, "must be in [0, 1]");
        }

        Positive(InitMaxHorizontalSigmaMetres, nameof(InitMaxHorizontalSigmaMetres));
        Positive(UncertainHorizontalSigmaMetres, nameof(UncertainHorizontalSigmaMetres));
        if (!(UncertainRejectionRatio > 0 && UncertainRejectionRatio <= 1))
        {
            throw new ArgumentOutOfRangeException(nameof(UncertainRejectionRatio), UncertainRejectionRatio, "must be in (0, 1]");
        }

        Range(RejectionWindow, 1, 64, nameof(RejectionWindow));
        Range(MaxConsecutiveRejections, 1, 1_000_000, nameof(MaxConsecutiveRejections));
        Range(RejectionRunBeforeInflation, 0, 1_000_000, nameof(RejectionRunBeforeInflation));
        if (!(RejectionInflationFactor >= 1 && RejectionInflationFactor <= 10))
        {
            throw new ArgumentOutOfRangeException(nameof(RejectionInflationFactor), RejectionInflationFactor, "must be in [1, 10]");
        }

        Positive(DivergenceHorizontalSigmaMetres, nameof(DivergenceHorizontalSigmaMetres));
        if (DivergenceHorizontalSigmaMetres <= UncertainHorizontalSigmaMetres)
        {
            throw new ArgumentException($"{nameof(DivergenceHorizontalSigmaMetres)} must exceed {nameof(UncertainHorizontalSigmaMetres)}", nameof(DivergenceHorizontalSigmaMetres));
        }

        NonNegative(ImpossibleValueMarginMetres, nameof(ImpossibleValueMarginMetres));
    }

    private static void Finite(double value, string name)
    {
        if (!double.IsFinite(value))
        {
            throw new ArgumentOutOfRangeException(name, value, "must be finite");
        }
    }

    private static void Positive(double value, string name)
    {
        if (!(value > 0) || !double.IsFinite(value))
        {
            throw new ArgumentOutOfRangeException(name, value, "must be positive and finite");
        }
    }

    private static void NonNegative(double value, string name)
    {
        if (!(value >= 0) || !double.IsFinite(value))
        {
            throw new ArgumentOutOfRangeException(name, value, "must be non-negative and finite");
        }
    }

    private static void Range(int value, int min, int max, string name)
    {
        if (value < min || value > max)
        {
            throw new ArgumentOutOfRangeException(name, value, $"must be between {min} and {max}");
        }
    }
}
