using Fleet.Estimation.Filtering;

namespace Fleet.Estimation.Bias.Training;

/// <summary>Settings of <see cref="BiasTrainer"/>. Defaults suit ~10⁴–10⁶ samples.</summary>
public sealed record BiasTrainerOptions
{
    /// <summary>Hidden layer widths (default three layers of 30).</summary>
    public IReadOnlyList<int> HiddenWidths { get; init; } = [30, 30, 30];

    public BiasActivation Activation { get; init; } = BiasActivation.Tanh;

    public LinkFeatureSet FeatureSet { get; init; } = LinkFeatureSet.Full;

    /// <summary>
    /// Loss on the TDOA residual. Cauchy (default) gives large residuals (NLOS) almost no pull;
    /// <see cref="RobustKernel.LeastSquares"/> is plain MSE, for comparison.
    /// </summary>
    public RobustKernel Loss { get; init; } = RobustKernel.Cauchy;

    /// <summary>Tuning constant k (threshold c = k·σ); null takes the 95 %-efficiency default of the kernel.</summary>
    public double? LossTuning { get; init; }

    /// <summary>Floor (m) of the robust residual scale σ, so the loss never collapses onto a perfect fit.</summary>
    public double MinimumResidualScale { get; init; } = 1e-3;

    /// <summary>Adam step size α (Kingma &amp; Ba 2015 default 1e-3).</summary>
    public double LearningRate { get; init; } = 1e-3;

    public double Beta1 { get; init; } = 0.9;

    public double Beta2 { get; init; } = 0.999;

    public double Epsilon { get; init; } = 1e-8;

    /// <summary>Samples (TDOA values) per Adam step.</summary>
    public int BatchSize { get; init; } = 256;

    public int MaxEpochs { get; init; } = 100;

    /// <summary>Stop after this many epochs without a better validation robust RMSE (see <see cref="TrainingProgress"/>).</summary>
    public int Patience { get; init; } = 8;

    /// <summary>Target share of samples held out for validation (whole groups, robots or time blocks).</summary>
    public double ValidationFraction { get; init; } = 0.2;

    /// <summary>
    /// Samples whose target is further than this many robust SDs (1.4826·MAD) from the median target are "screened":
    /// excluded from the validation RMSE and, with <see cref="DropScreenedSamples"/>, from training.
    /// Null or non-positive disables screening.
    /// </summary>
    public double? OutlierScreenSigmas { get; init; } = 6.0;

    /// <summary>Drop screened samples from training (the robust loss handles the rest).</summary>
    public bool DropScreenedSamples { get; init; } = true;

    /// <summary>Seed for initialisation, splits and shuffling; the result is bit-identical for a seed.</summary>
    public int Seed { get; init; } = 1;

    /// <summary>
    /// Threads for gradient computation. Each batch is always cut into the same fixed chunks and their gradients
    /// summed in a fixed order, so the result does not depend on this value.
    /// </summary>
    public int MaxDegreeOfParallelism { get; init; } = Math.Min(2, Environment.ProcessorCount);
}

/// <summary>How validation samples were chosen.</summary>
public enum ValidationSplitKind
{
    /// <summary>Whole anchor layouts (groups) held out: measures generalisation to new layouts.</summary>
    WholeLayouts,

    /// <summary>Only one layout: whole robots held out instead (weaker: same anchors in both sets).</summary>
    WholeRobots,

    /// <summary>One layout and one robot: contiguous time blocks held out (weakest).</summary>
    TimeBlocks,

    /// <summary>Too few samples for validation; no early stopping.</summary>
    None,
}

/// <summary>
/// Progress of one epoch, for progress bars. Errors in metres (NaN without validation). <see cref="ValidationRobustRmse"/>
/// is 1.4826·median |residual|, which NLOS outliers barely move; early stopping keeps the epoch where it is smallest
/// (<see cref="BestEpoch"/>, <see cref="BestValidationRobustRmse"/>).
/// </summary>
public readonly record struct TrainingProgress(
    int Epoch, int MaxEpochs, double TrainLoss, double ValidationRmse, double ValidationRobustRmse, int BestEpoch, double BestValidationRobustRmse);

/// <summary>
/// What training did. RMSEs are of the TDOA residual (m): "before" = measured − true ddiff (no correction),
/// "after" = that minus the model's predicted bias, both over non-screened samples and computed with the shipped
/// float32 <see cref="BiasNetwork"/>.
/// </summary>
public sealed record TrainingReport
{
    public required int EpochsRun { get; init; }

    /// <summary>Epoch (1-based) whose weights were kept; 0 means the initial weights.</summary>
    public required int BestEpoch { get; init; }

    public required bool StoppedEarly { get; init; }

    public required double TrainRmseBefore { get; init; }

    public required double TrainRmseAfter { get; init; }

    public required double ValidationRmseBefore { get; init; }

    public required double ValidationRmseAfter { get; init; }

    /// <summary>1.4826·median |residual| over the validation set without correction (m): an outlier-resistant RMSE.</summary>
    public required double ValidationRobustRmseBefore { get; init; }

    /// <summary>Same after correction (m); early stopping minimises this.</summary>
    public required double ValidationRobustRmseAfter { get; init; }

    public required ValidationSplitKind ValidationSplit { get; init; }

    /// <summary>Groups (layouts) with samples in the training set.</summary>
    public required IReadOnlyList<string> TrainingGroups { get; init; }

    /// <summary>Groups (layouts) with samples in the validation set.</summary>
    public required IReadOnlyList<string> ValidationGroups { get; init; }

    /// <summary>All input samples per group.</summary>
    public required IReadOnlyDictionary<string, int> SampleCountsByGroup { get; init; }

    /// <summary>Distinct site ids of the anchor maps involved.</summary>
    public required IReadOnlyList<string> Sites { get; init; }

    public required int TrainingSamples { get; init; }

    public required int ValidationSamples { get; init; }

    /// <summary>Samples screened as gross outliers (see <see cref="BiasTrainerOptions.OutlierScreenSigmas"/>).</summary>
    public required int ScreenedSamples { get; init; }

    /// <summary>Robust residual scale σ (m) in the last epoch.</summary>
    public required double FinalResidualScale { get; init; }

    public required BiasTrainerOptions Options { get; init; }

    public required TimeSpan Duration { get; init; }
}

/// <summary>A trained model and how it was trained.</summary>
public sealed record BiasTrainingResult(BiasNetwork Model, TrainingReport Report);
