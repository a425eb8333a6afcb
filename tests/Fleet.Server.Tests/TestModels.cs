using Fleet.Data.BiasModels;
using Fleet.Estimation.Bias;

namespace Fleet.Server.Tests;

internal static class TestModels
{
    /// <summary>A linear bias network with all-zero weights (predicts zero bias), in the Fleet model file format.</summary>
    public static byte[] ZeroModelBytes()
    {
        var inputs = LinkFeatures.CountFor(LinkFeatureSet.Full);
        var parameters = new float[BiasNetwork.CountParameters(inputs, [])];
        var mean = new float[inputs];
        var std = Enumerable.Repeat(1f, inputs).ToArray();
        var network = new BiasNetwork(LinkFeatureSet.Full, BiasActivation.Tanh, [], parameters, mean, std, 1f);
        return BiasModelFile.ToBytes(network, new BiasModelMetadata());
    }
}
