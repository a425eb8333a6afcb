using Fleet.Data.BiasModels;
using Fleet.Estimation.Bias;
using Fleet.Estimation.Bias.Training;

namespace Fleet.Data.Tests.BiasModels;

internal static class BiasModelFixtures
{
    /// <summary>
    /// A network with seeded random weights (uniform within each layer's Glorot bound, the scale trained networks keep)
    /// and normalisation.
    /// </summary>
    public static BiasNetwork RandomNetwork(int seed, BiasActivation activation = BiasActivation.Tanh, int[]? hidden = null,
        LinkFeatureSet set = LinkFeatureSet.Full)
    {
        hidden ??= [30, 30, 30];
        var random = new Random(seed);
        var inputs = LinkFeatures.CountFor(set);
        var parameters = new float[BiasNetwork.CountParameters(inputs, hidden)];
        int[] sizes = [inputs, .. hidden, 1];
        var offset = 0;
        for (var l = 0; l < sizes.Length - 1; l++)
        {
            var bound = Math.Sqrt(6.0 / (sizes[l] + sizes[l + 1]));
            var count = (sizes[l] + 1) * sizes[l + 1];
            for (var i = 0; i < count; i++)
            {
                parameters[offset + i] = (float)(((random.NextDouble() * 2) - 1) * bound);
            }

            offset += count;
        }

        var mean = new float[inputs];
        var std = new float[inputs];
        for (var i = 0; i < inputs; i++)
        {
            mean[i] = (float)(random.NextDouble() - 0.5);
            std[i] = 0.3f + (float)random.NextDouble();
        }

        mean[0] = 14.5f;
        std[0] = 7.25f;
        return new BiasNetwork(set, activation, hidden, parameters, mean, std, 0.0625f);
    }

    public static BiasModelMetadata Metadata() => new()
    {
        Sites = ["harbor-point-dc"],
        TrainingLayouts = ["harbor-point-L1", "harbor-point-L2"],
        ValidationLayouts = ["harbor-point-L3"],
        SampleCounts = new Dictionary<string, int> { ["harbor-point-L1"] = 1200, ["harbor-point-L2"] = 900, ["harbor-point-L3"] = 450 },
        TrainingSamples = 2100,
        ValidationSamples = 450,
        ValidationSplit = ValidationSplitKind.WholeLayouts,
        ValidationRmseBefore = 0.0812,
        ValidationRmseAfter = 0.0213,
        ValidationRobustRmseBefore = 0.0705,
        ValidationRobustRmseAfter = 0.0151,
        Epochs = 37,
        BestEpoch = 29,
        Loss = "Cauchy",
        Seed = 5,
        CreatedUtc = new DateTimeOffset(2025, 3, 14, 9, 26, 53, TimeSpan.Zero),
        Notes = "fixture",
    };
}
