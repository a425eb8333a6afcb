using Fleet.Data.BiasModels;
using Fleet.Estimation.Bias;
using Microsoft.ML.OnnxRuntime;
using Microsoft.ML.OnnxRuntime.Tensors;

namespace Fleet.Data.Tests.BiasModels;

public class OnnxExportTests
{
    [Theory]
    [InlineData(BiasActivation.Tanh)]
    [InlineData(BiasActivation.SiLU)]
    public void Export_RandomInputs_OnnxRuntimeMatchesFleetInference(BiasActivation activation)
    {
        // Reference implementation: ONNX Runtime (Microsoft.ML.OnnxRuntime InferenceSession, DenseTensor<float>,
        // NamedOnnxValue.CreateFromTensor) evaluating the exported graph; Gemm semantics per the ONNX operator spec (Gemm-13).
        var model = BiasModelFixtures.RandomNetwork(21, activation, [30, 30, 30]);
        var onnx = OnnxExport.ToBytes(model, "fixture");
        const int rows = 256;
        var featureCount = model.InputCount;
        var random = new Random(17);
        var input = new DenseTensor<float>([rows, featureCount]);
        for (var r = 0; r < rows; r++)
        {
            input[r, 0] = (float)(random.NextDouble() * 40);
            for (var i = 1; i < featureCount; i++)
            {
                input[r, i] = (float)((random.NextDouble() * 2) - 1);
            }
        }

        using var session = new InferenceSession(onnx);
        using var results = session.Run([NamedOnnxValue.CreateFromTensor(OnnxExport.InputName, input)]);
        var output = results.Single(v => v.Name == OnnxExport.OutputName).AsTensor<float>();
        Assert.Equal([rows, 1], output.Dimensions.ToArray());

        var features = new float[featureCount];
        var worst = 0.0;
        double worstFleet = 0, worstOrt = 0;
        for (var r = 0; r < rows; r++)
        {
            for (var i = 0; i < featureCount; i++)
            {
                features[i] = input[r, i];
            }

            double fleet = model.Evaluate(features);
            double reference = output[r, 0];

            // Relative to max(|value|, output scale): outputs are O(1) raw units × scale, and a value that happens to
            // cancel to near zero carries float32 rounding of its O(scale) terms, which no relative test can remove.
            var error = Math.Abs(fleet - reference) / Math.Max(Math.Abs(reference), model.OutputScale);
            worst = Math.Max(worst, error);
            var exact = Reference(model, features);
            worstFleet = Math.Max(worstFleet, Math.Abs(fleet - exact) / Math.Max(Math.Abs(exact), model.OutputScale));
            worstOrt = Math.Max(worstOrt, Math.Abs(reference - exact) / Math.Max(Math.Abs(exact), model.OutputScale));
        }

        Assert.True(worst < 1e-5, $"worst relative difference {worst:E2}; against a double forward pass: fleet {worstFleet:E2}, ONNX Runtime {worstOrt:E2}");
        Assert.True(worstFleet < 1e-5, $"fleet vs double forward pass {worstFleet:E2}");
    }

    /// <summary>Plain double-precision forward pass h = act(W·x + b), for telling which side a difference comes from.</summary>
    private static double Reference(BiasNetwork network, float[] features)
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

    [Fact]
    public void Export_Graph_DeclaresNamedInputAndOutput()
    {
        var model = BiasModelFixtures.RandomNetwork(2, hidden: [8]);
        using var session = new InferenceSession(OnnxExport.ToBytes(model));
        var input = Assert.Single(session.InputMetadata);
        Assert.Equal(OnnxExport.InputName, input.Key);
        Assert.Equal([-1, model.InputCount], input.Value.Dimensions);
        var output = Assert.Single(session.OutputMetadata);
        Assert.Equal(OnnxExport.OutputName, output.Key);
        Assert.Equal("Full", session.ModelMetadata.CustomMetadataMap["fleet.feature_set"]);
    }
}
