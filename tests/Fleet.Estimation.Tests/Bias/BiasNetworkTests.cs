using Fleet.Estimation.Bias;
using Fleet.Estimation.Geometry;

namespace Fleet.Estimation.Tests.Bias;

public class BiasNetworkTests
{
    [Theory]
    [InlineData(BiasActivation.Tanh)]
    [InlineData(BiasActivation.SiLU)]
    public void Evaluate_RandomInputs_MatchesPlainDoubleForwardPass(BiasActivation activation)
    {
        // Reference: the textbook forward pass h = act(W·x + b) written out in double with scalar loops.
        var network = BiasTestData.RandomNetwork(11, activation, [30, 17, 30]);
        var random = new Random(5);
        var features = new float[LinkFeatures.Count];
        for (var k = 0; k < 200; k++)
        {
            for (var i = 0; i < features.Length; i++)
            {
                features[i] = (float)((random.NextDouble() * 2) - 1);
            }

            features[0] = (float)(random.NextDouble() * 40);
            var expected = ReferenceForward(network, features);
            var actual = network.Evaluate(features);
            Assert.True(Math.Abs(actual - expected) <= 1e-5 * Math.Max(Math.Abs(expected), 1e-2),
                $"sample {k}: fleet {actual} vs reference {expected}");
        }
    }

    [Fact]
    public void PredictTdoaBias_EqualsLinkBDifferenceLinkA_AndCloneAgrees()
    {
        var network = BiasTestData.RandomNetwork(2);
        var clone = network.Clone();
        var map = BiasTestData.Layout("harbor-point", 1);
        var tag = new Vector3D(12, 7, 0.45);
        var expected = network.PredictLinkBias(map, 3, tag, 0.4) - network.PredictLinkBias(map, 1, tag, 0.4);
        Assert.Equal(expected, network.PredictTdoaBias(map, 1, 3, tag, 0.4), 1e-12);
        Assert.Equal(expected, clone.PredictTdoaBias(map, 1, 3, tag, 0.4), 1e-12);
    }

    [Fact]
    public void PredictTdoaBias_TenThousandCalls_AllocatesNothing()
    {
        var network = BiasTestData.RandomNetwork(4);
        var map = BiasTestData.Layout("harbor-point", 2);
        var tag = new Vector3D(10, 5, 0.45);
        var sink = 0.0;
        for (var k = 0; k < 100; k++)
        {
            sink += network.PredictTdoaBias(map, k % 6, (k + 1) % 6, tag, 0.1);
        }

        var before = GC.GetAllocatedBytesForCurrentThread();
        for (var k = 0; k < 10_000; k++)
        {
            sink += network.PredictTdoaBias(map, k % 6, (k + 1) % 6, tag, k * 1e-3);
        }

        var allocated = GC.GetAllocatedBytesForCurrentThread() - before;
        Assert.Equal(0, allocated);
        Assert.True(double.IsFinite(sink));
    }

    [Fact]
    public void Constructor_WrongParameterCount_ThrowsNamingTheLayers()
    {
        var ex = Assert.Throws<ArgumentException>(() => new BiasNetwork(LinkFeatureSet.Full, BiasActivation.Tanh, [4],
            new float[10], new float[7], Enumerable.Repeat(1f, 7).ToArray(), 1f));
        Assert.Contains("[7, 4, 1]", ex.Message);
    }

    [Fact]
    public void Constructor_ZeroStd_Throws()
    {
        var std = Enumerable.Repeat(1f, 7).ToArray();
        std[3] = 0;
        Assert.Throws<ArgumentException>(() => new BiasNetwork(LinkFeatureSet.Full, BiasActivation.Tanh, [4],
            new float[BiasNetwork.CountParameters(7, [4])], new float[7], std, 1f));
    }

    private static double ReferenceForward(BiasNetwork network, float[] features)
    {
        var sizes = network.LayerSizes;
        var p = network.Parameters.ToArray();
        var x = new double[sizes[0]];
        for (var i = 0; i < x.Length; i++)
        {
            x[i] = (features[i] - (double)network.InputMean[i]) / network.InputStd[i];
        }

        var offset = 0;
        for (var l = 0; l < sizes.Count - 1; l++)
        {
            int nIn = sizes[l], nOut = sizes[l + 1];
            var y = new double[nOut];
            for (var j = 0; j < nOut; j++)
            {
                var z = (double)p[offset + (nIn * nOut) + j];
                for (var i = 0; i < nIn; i++)
                {
                    z += p[offset + (j * nIn) + i] * x[i];
                }

                var hidden = l < sizes.Count - 2;
                y[j] = !hidden ? z : network.Activation == BiasActivation.Tanh ? Math.Tanh(z) : z / (1 + Math.Exp(-z));
            }

            offset += (nIn + 1) * nOut;
            x = y;
        }

        return x[0] * network.OutputScale;
    }
}
