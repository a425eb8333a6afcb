using Fleet.Estimation.Bias.Training;

namespace Fleet.Data.BiasModels;

/// <summary>
/// Training provenance stored in a bias model file's JSON header. Errors in metres; null where unknown
/// (for example no validation set).
/// </summary>
public sealed record BiasModelMetadata
{
    /// <summary>Site ids whose recordings trained the model.</summary>
    public IReadOnlyList<string> Sites { get; init; } = [];

    /// <summary>Anchor layouts (sample groups) used for training.</summary>
    public IReadOnlyList<string> TrainingLayouts { get; init; } = [];

    /// <summary>Anchor layouts held out for validation.</summary>
    public IReadOnlyList<string> ValidationLayouts { get; init; } = [];

    /// <summary>Input samples per layout (group).</summary>
    public IReadOnlyDictionary<string, int> SampleCounts { get; init; } = new Dictionary<string, int>();

    public int TrainingSamples { get; init; }

    public int ValidationSamples { get; init; }

    /// <summary>How validation samples were chosen (whole layouts, whole robots, time blocks, none).</summary>
    public ValidationSplitKind ValidationSplit { get; init; } = ValidationSplitKind.None;

    public double? ValidationRmseBefore { get; init; }

    public double? ValidationRmseAfter { get; init; }

    public double? ValidationRobustRmseBefore { get; init; }

    public double? ValidationRobustRmseAfter { get; init; }

    public int? Epochs { get; init; }

    public int? BestEpoch { get; init; }

    /// <summary>Loss kernel name (e.g. "Cauchy").</summary>
    public string? Loss { get; init; }

    public int? Seed { get; init; }

    /// <summary>When the model was trained (UTC).</summary>
    public DateTimeOffset CreatedUtc { get; init; }

    /// <summary>Free text (who, why).</summary>
    public string? Notes { get; init; }

    /// <summary>Metadata from a training report; NaN errors become null.</summary>
    public static BiasModelMetadata FromReport(TrainingReport report, DateTimeOffset createdUtc, string? notes = null)
    {
        ArgumentNullException.ThrowIfNull(report);
        return new BiasModelMetadata
        {
            Sites = report.Sites,
            TrainingLayouts = report.TrainingGroups,
            ValidationLayouts = report.ValidationGroups,
            SampleCounts = report.SampleCountsByGroup,
            TrainingSamples = report.TrainingSamples,
            ValidationSamples = report.ValidationSamples,
            ValidationSplit = report.ValidationSplit,
            ValidationRmseBefore = FiniteOrNull(report.ValidationRmseBefore),
            ValidationRmseAfter = FiniteOrNull(report.ValidationRmseAfter),
            ValidationRobustRmseBefore = FiniteOrNull(report.ValidationRobustRmseBefore),
            ValidationRobustRmseAfter = FiniteOrNull(report.ValidationRobustRmseAfter),
            Epochs = report.EpochsRun,
            BestEpoch = report.BestEpoch,
            Loss = report.Options.Loss.ToString(),
            Seed = report.Options.Seed,
            CreatedUtc = createdUtc.ToUniversalTime(),
            Notes = notes,
        };
    }

    private static double? FiniteOrNull(double value) => double.IsFinite(value) ? value : null;
}
