using Fleet.Estimation.Anchors;
using Fleet.Estimation.Bias;
using Fleet.Estimation.Bias.Training;
using Fleet.Estimation.Filtering;
using Fleet.Estimation.Geometry;
using Fleet.Estimation.Measurements;

namespace Fleet.Estimation.Tests.Bias;

/// <summary>
/// Training on an invented data set with a known smooth link bias (see <see cref="BiasTestData"/>): four layouts to
/// train and validate on, a fifth unseen layout to test generalisation, 2 cm noise and 10 % positive NLOS-like outliers.
/// </summary>
public class BiasTrainerTests
{
    private static readonly BiasTrainerOptions FastOptions = new()
    {
        HiddenWidths = [16, 16],
        BatchSize = 64,
        MaxEpochs = 40,
        Patience = 8,
        LearningRate = 3e-3,
        Seed = 5,
        MaxDegreeOfParallelism = 1,
    };

    private static readonly Lazy<(List<TdoaTrainingSample> Train, List<TdoaTrainingSample> Unseen)> Data = new(() =>
    {
        var train = new List<TdoaTrainingSample>();
        for (var layout = 1; layout <= 4; layout++)
        {
            var map = BiasTestData.Layout($"harbor-point-L{layout}", 100 + layout);
            train.AddRange(BiasTestData.Samples(map, map.SiteId, 1500, 200 + layout));
        }

        var unseen = BiasTestData.Layout("harbor-point-L9", 999);
        return (train, BiasTestData.Samples(unseen, unseen.SiteId, 1500, 999, noise: 0, outlierShare: 0));
    });

    [Fact]
    public void Train_SyntheticLayoutsWithOutliers_CorrectsUnseenLayout()
    {
        var (train, unseen) = Data.Value;
        var epochs = new List<TrainingProgress>();
        var result = BiasTrainer.Train(train, FastOptions, new SynchronousProgress(epochs.Add));

        var (corrected, uncorrected) = BiasTestData.ErrorAgainstTruth(result.Model, unseen);
        Assert.True(corrected < 0.4 * uncorrected, $"unseen layout: RMSE {corrected:F4} m after vs {uncorrected:F4} m before");

        var report = result.Report;
        Assert.Equal(ValidationSplitKind.WholeLayouts, report.ValidationSplit);
        Assert.Empty(report.TrainingGroups.Intersect(report.ValidationGroups));
        Assert.Equal(4, report.SampleCountsByGroup.Count);
        Assert.True(report.ValidationRobustRmseAfter < 0.4 * report.ValidationRobustRmseBefore,
            $"validation robust RMSE {report.ValidationRobustRmseAfter:F4} after vs {report.ValidationRobustRmseBefore:F4} before");
        Assert.True(report.ValidationRmseAfter < report.ValidationRmseBefore);
        Assert.Equal(report.EpochsRun, epochs.Count);
        Assert.InRange(report.BestEpoch, 1, report.EpochsRun);
    }

    [Fact]
    public void Train_SameSeed_BitIdenticalWeightsWhateverTheThreadCount()
    {
        var (train, _) = Data.Value;
        var options = FastOptions with { MaxEpochs = 3 };
        var first = BiasTrainer.Train(train, options).Model;
        var second = BiasTrainer.Train(train, options with { MaxDegreeOfParallelism = 2 }).Model;

        // Bit identity is the property under test, so exact comparison is intended here.
        Assert.True(first.Parameters.SequenceEqual(second.Parameters));
        Assert.True(first.InputMean.SequenceEqual(second.InputMean));
    }

    [Fact]
    public void Train_WithOutliers_RobustLossBeatsPlainSquaredError()
    {
        var (train, unseen) = Data.Value;
        var noScreening = FastOptions with { OutlierScreenSigmas = null, DropScreenedSamples = false };
        var robust = BiasTrainer.Train(train, noScreening with { Loss = RobustKernel.Cauchy }).Model;
        var squared = BiasTrainer.Train(train, noScreening with { Loss = RobustKernel.LeastSquares }).Model;

        var robustError = BiasTestData.ErrorAgainstTruth(robust, unseen).Corrected;
        var squaredError = BiasTestData.ErrorAgainstTruth(squared, unseen).Corrected;
        Assert.True(robustError < 0.8 * squaredError, $"Cauchy {robustError:F4} m vs least squares {squaredError:F4} m");
    }

    [Fact]
    public void Train_WithoutAnchorOrientation_DoesNotTransferToUnseenLayout()
    {
        // Ablation: the known bias depends on the tag direction in the antenna frame; without the anchors' orientation
        // the same network cannot tell a new layout's antennas apart, so it corrects (almost) nothing there.
        var (train, unseen) = Data.Value;
        var full = BiasTrainer.Train(train, FastOptions).Model;
        var ablated = BiasTrainer.Train(train, FastOptions with { FeatureSet = LinkFeatureSet.WithoutAnchorOrientation }).Model;

        var fullError = BiasTestData.ErrorAgainstTruth(full, unseen);
        var ablatedError = BiasTestData.ErrorAgainstTruth(ablated, unseen);
        Assert.True(ablatedError.Corrected > 0.7 * ablatedError.Uncorrected, $"ablated {ablatedError.Corrected:F4} of {ablatedError.Uncorrected:F4} m");
        Assert.True(fullError.Corrected < 0.25 * ablatedError.Corrected, $"full {fullError.Corrected:F4} vs ablated {ablatedError.Corrected:F4} m");
    }

    [Fact]
    public void Train_SingleLayoutSeveralRobots_HoldsOutWholeRobots()
    {
        var (train, _) = Data.Value;
        var single = train.Where(s => s.Group == "harbor-point-L1").ToList();
        var report = BiasTrainer.Train(single, FastOptions with { MaxEpochs = 1 }).Report;
        Assert.Equal(ValidationSplitKind.WholeRobots, report.ValidationSplit);
        Assert.True(report.ValidationSamples > 0);
    }

    [Fact]
    public void Extract_TruthBracketsTdoa_InterpolatesAndComputesTarget()
    {
        var map = AnchorMap.Create("harbor-point", [
            new Anchor("HP-A01", new Vector3D(0, 0, 4), Vector3D.Zero, 0.10),
            new Anchor("HP-A02", new Vector3D(20, 0, 4), Vector3D.Zero),
            new Anchor("HP-A03", new Vector3D(0, 20, 4), Vector3D.Zero),
            new Anchor("HP-A04", new Vector3D(20, 20, 8), Vector3D.Zero)]);
        var layout = new SiteLayout(map, []);
        ObservationRecord[] records =
        [
            new TruthRecord(1.0, "tug-07", new Vector3D(5, 5, 0.5), 3.0),
            new TdoaRecord(1.05, "tug-07", "HP-A01", "HP-A02", 1.234),
            new TruthRecord(1.1, "tug-07", new Vector3D(6, 5, 0.5), -3.0),
            new TdoaRecord(1.5, "tug-07", "HP-A01", "HP-A02", 1.0), // next truth 0.5 s later: gap
            new TruthRecord(1.6, "tug-07", new Vector3D(7, 5, 0.5), 0.0),
            new TdoaRecord(1.55, "tug-07", "HP-A01", "HP-X99", 1.0), // unknown anchor
            new TdoaRecord(1.55, "tug-08", "HP-A01", "HP-A02", 1.0), // no truth for this robot
        ];

        var extraction = TrainingSampleExtractor.Extract(layout, records);

        Assert.Equal(4, extraction.TdoaRecords);
        Assert.Equal(1, extraction.SkippedTruthGap);
        Assert.Equal(1, extraction.SkippedUnknownAnchor);
        Assert.Equal(1, extraction.SkippedNoTruth);
        var sample = Assert.Single(extraction.Samples);
        Assert.Equal(5.5, sample.TagPosition.X, 1e-12);

        // Yaw 3.0 → −3.0 crosses ±π: the shorter arc's midpoint is π (or −π).
        Assert.Equal(Math.PI, Math.Abs(sample.RobotYaw), 1e-9);

        // True ddiff with the antenna delay of HP-A01: |p − b| − (|p − a| + 0.10).
        var p = new Vector3D(5.5, 5, 0.5);
        var expectedTrue = Vector3D.Distance(p, new Vector3D(20, 0, 4)) - (Vector3D.Distance(p, new Vector3D(0, 0, 4)) + 0.10);
        Assert.Equal(expectedTrue, sample.TrueDistanceDifference, 1e-12);
        Assert.Equal(1.234 - expectedTrue, sample.Target, 1e-12);
        Assert.Equal("harbor-point", sample.Group);
    }

    /// <summary>IProgress that reports on the calling thread (Progress&lt;T&gt; posts to the thread pool).</summary>
    private sealed class SynchronousProgress(Action<TrainingProgress> report) : IProgress<TrainingProgress>
    {
        public void Report(TrainingProgress value) => report(value);
    }
}
