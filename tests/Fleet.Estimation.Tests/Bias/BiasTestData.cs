using Fleet.Estimation.Anchors;
using Fleet.Estimation.Bias;
using Fleet.Estimation.Bias.Training;
using Fleet.Estimation.Geometry;

namespace Fleet.Estimation.Tests.Bias;

/// <summary>
/// Invented "Harbor Point DC" layouts and a known smooth link-bias function, for training tests.
/// The bias depends on the tag direction in the anchor's antenna frame, so it only transfers to new layouts
/// when the model sees anchor orientation.
/// </summary>
internal static class BiasTestData
{
    /// <summary>Known link bias (m): smooth in distance d (m), tag-in-anchor direction u and anchor-in-tag direction v.</summary>
    public static double LinkBias(ReadOnlySpan<float> f)
    {
        double d = f[0], ux = f[1], uy = f[2], uz = f[3], vx = f[4];
        return (0.10 * (1 - ux)) + (0.04 * uy * uz) + (0.03 * vx) + (0.02 * d / 10.0);
    }

    public static double TdoaBias(AnchorMap map, int a, int b, Vector3D p, double yaw)
    {
        Span<float> f = stackalloc float[LinkFeatures.Count];
        LinkFeatures.Write(map, b, p, yaw, LinkFeatureSet.Full, f);
        var gb = LinkBias(f);
        LinkFeatures.Write(map, a, p, yaw, LinkFeatureSet.Full, f);
        return gb - LinkBias(f);
    }

    /// <summary>A 40 × 25 m hall with six anchors at 3–7 m, random yaw and pitch (deterministic per seed).</summary>
    public static AnchorMap Layout(string name, int seed)
    {
        var random = new Random(seed);
        var anchors = new List<Anchor>();
        for (var i = 0; i < 6; i++)
        {
            var position = new Vector3D(random.NextDouble() * 40, random.NextDouble() * 25, 3 + (random.NextDouble() * 4));
            var orientation = new Vector3D(random.NextDouble() * 360 - 180, (random.NextDouble() * 60) - 30, (random.NextDouble() * 20) - 10);
            anchors.Add(new Anchor($"HP-A{i + 1:00}", position, orientation));
        }

        return AnchorMap.Create(name, anchors);
    }

    /// <summary>
    /// Samples on <paramref name="map"/>: random tag poses at 0.45 m height, random anchor pairs,
    /// target = true TDOA bias + N(0, σ²) noise, and with probability <paramref name="outlierShare"/> a positive
    /// NLOS-like excess U(0.3, 1.0) m.
    /// </summary>
    public static List<TdoaTrainingSample> Samples(AnchorMap map, string group, int count, int seed, double noise = 0.02, double outlierShare = 0.1)
    {
        var random = new Random(seed);
        var list = new List<TdoaTrainingSample>(count);
        for (var k = 0; k < count; k++)
        {
            var p = new Vector3D(random.NextDouble() * 40, random.NextDouble() * 25, 0.45);
            var yaw = (random.NextDouble() * 2 * Math.PI) - Math.PI;
            var a = random.Next(map.Count);
            var b = (a + 1 + random.Next(map.Count - 1)) % map.Count;
            var truth = TrainingSampleExtractor.ModelledDistanceDifference(map, a, b, p);
            var error = TdoaBias(map, a, b, p, yaw) + (noise * Gaussian(random));
            if (random.NextDouble() < outlierShare)
            {
                error += 0.3 + (0.7 * random.NextDouble());
            }

            var robot = $"tug-{(k % 4) + 1:00}";
            list.Add(new TdoaTrainingSample(group, robot, k * 0.01, map, a, b, p, yaw, truth + error, truth));
        }

        return list;
    }

    /// <summary>RMSE (m) of the model's TDOA bias against the known bias, and of the known bias itself (no correction).</summary>
    public static (double Corrected, double Uncorrected) ErrorAgainstTruth(ITdoaBiasModel model, IReadOnlyList<TdoaTrainingSample> samples)
    {
        double corrected = 0, uncorrected = 0;
        foreach (var s in samples)
        {
            var truth = TdoaBias(s.Map, s.AnchorA, s.AnchorB, s.TagPosition, s.RobotYaw);
            var predicted = model.PredictTdoaBias(s.Map, s.AnchorA, s.AnchorB, s.TagPosition, s.RobotYaw);
            corrected += (truth - predicted) * (truth - predicted);
            uncorrected += truth * truth;
        }

        return (Math.Sqrt(corrected / samples.Count), Math.Sqrt(uncorrected / samples.Count));
    }

    public static double Gaussian(Random random) =>
        Math.Sqrt(-2 * Math.Log(1 - random.NextDouble())) * Math.Cos(2 * Math.PI * random.NextDouble());

    /// <summary>A network with random weights (for inference tests).</summary>
    public static BiasNetwork RandomNetwork(int seed, BiasActivation activation = BiasActivation.Tanh, int[]? hidden = null)
    {
        hidden ??= [30, 30, 30];
        var random = new Random(seed);
        var count = BiasNetwork.CountParameters(LinkFeatures.Count, hidden);
        var parameters = new float[count];
        for (var i = 0; i < count; i++)
        {
            parameters[i] = (float)((random.NextDouble() * 2) - 1) * 0.4f;
        }

        var mean = new float[LinkFeatures.Count];
        var std = new float[LinkFeatures.Count];
        for (var i = 0; i < mean.Length; i++)
        {
            mean[i] = (float)random.NextDouble();
            std[i] = 0.5f + (float)random.NextDouble();
        }

        mean[0] = 15f;
        std[0] = 8f;
        return new BiasNetwork(LinkFeatureSet.Full, activation, hidden, parameters, mean, std, 0.05f);
    }
}
