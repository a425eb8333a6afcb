using Fleet.Estimation.Bias;
using Fleet.Estimation.Geometry;

namespace Fleet.Performance;

/// <summary>
/// A default-sized bias network (3 × 30, tanh) with seeded random weights, and tag poses inside the benchmark hall:
/// inference cost does not depend on what the weights learned, only on the architecture.
/// </summary>
public sealed class BiasBenchmarkScenario
{
    public const int Poses = 1024;

    public BiasBenchmarkScenario(FilterBenchmarkScenario filter, int seed = 5)
    {
        Filter = filter;
        var random = new Random(seed);
        int[] hidden = [30, 30, 30];
        var inputs = LinkFeatures.CountFor(LinkFeatureSet.Full);
        var parameters = new float[BiasNetwork.CountParameters(inputs, hidden)];
        for (var i = 0; i < parameters.Length; i++)
        {
            parameters[i] = (float)((random.NextDouble() - 0.5) * 0.4);
        }

        var mean = new float[inputs];
        var std = new float[inputs];
        Array.Fill(std, 1f);
        mean[0] = 12f;
        std[0] = 6f;
        Model = new BiasNetwork(LinkFeatureSet.Full, BiasActivation.Tanh, hidden, parameters, mean, std, 0.1f);

        Tags = new Vector3D[Poses];
        Yaws = new double[Poses];
        AnchorA = new int[Poses];
        AnchorB = new int[Poses];
        for (var i = 0; i < Poses; i++)
        {
            Tags[i] = FilterBenchmarkScenario.TagAt(i * 0.04);
            Yaws[i] = (random.NextDouble() * 2 * Math.PI) - Math.PI;
            AnchorA[i] = random.Next(filter.Map.Count);
            AnchorB[i] = (AnchorA[i] + 1 + random.Next(filter.Map.Count - 1)) % filter.Map.Count;
        }
    }

    public FilterBenchmarkScenario Filter { get; }

    public BiasNetwork Model { get; }

    public Vector3D[] Tags { get; }

    public double[] Yaws { get; }

    public int[] AnchorA { get; }

    public int[] AnchorB { get; }

    /// <summary>One corrected TDOA's worth of inference: the bias of pose <paramref name="i"/> (mod <see cref="Poses"/>).</summary>
    public double Predict(int i)
    {
        var k = i & (Poses - 1);
        return Model.PredictTdoaBias(Filter.Map, AnchorA[k], AnchorB[k], Tags[k], Yaws[k]);
    }
}
