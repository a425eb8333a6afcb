using System.Numerics.Tensors;

namespace Fleet.Estimation.Bias.Training;

/// <summary>
/// Double-precision forward and backward passes of the bias MLP over a chunk of TDOA samples (two links each).
/// Activations are stored unit-major ([units × rows], rows contiguous), so every step is a long vector operation
/// (TensorPrimitives Dot / MultiplyAdd over the batch) rather than many short ones.
/// Parameter layout is <see cref="BiasNetwork"/>'s canonical one: per layer W [out × in] row-major, then b [out].
/// An instance owns its buffers: one per thread.
/// </summary>
internal sealed class MlpTrainingKernel
{
    private readonly int[] _sizes;
    private readonly BiasActivation _activation;
    private readonly int _maxRows;
    private readonly double[][] _z;
    private readonly double[][] _h;
    private readonly double[] _deltaA;
    private readonly double[] _deltaB;
    private readonly double[] _scratch;
    private readonly double[] _sigmoid;
    private readonly double[] _output;

    public MlpTrainingKernel(IReadOnlyList<int> layerSizes, BiasActivation activation, int maxSamples)
    {
        _sizes = [.. layerSizes];
        _activation = activation;
        _maxRows = 2 * maxSamples;
        var layers = _sizes.Length - 1;
        _z = new double[layers][];
        _h = new double[layers][];
        var maxWidth = 0;
        for (var l = 0; l < _sizes.Length; l++)
        {
            maxWidth = Math.Max(maxWidth, _sizes[l]);
        }

        _h[0] = new double[_sizes[0] * _maxRows];
        for (var l = 1; l < layers; l++)
        {
            _z[l] = new double[_sizes[l] * _maxRows];
            _h[l] = new double[_sizes[l] * _maxRows];
        }

        _deltaA = new double[maxWidth * _maxRows];
        _deltaB = new double[maxWidth * _maxRows];
        _scratch = new double[maxWidth * _maxRows];
        _sigmoid = new double[maxWidth * _maxRows];
        _output = new double[_maxRows];
        ParameterCount = BiasNetwork.CountParameters(_sizes[0], _sizes[1..^1]);
    }

    public int ParameterCount { get; }

    public int MaxSamples => _maxRows / 2;

    /// <summary>
    /// Predicted TDOA bias s·(f(b) − f(a)) for each sample of <paramref name="indices"/>, written to
    /// <paramref name="predictions"/>[k] for the k-th index.
    /// </summary>
    /// <param name="theta">Parameters.</param>
    /// <param name="features">Normalised features [sample][link a, link b][F].</param>
    /// <param name="indices">Sample indices (at most <see cref="MaxSamples"/>).</param>
    /// <param name="outputScale">s.</param>
    /// <param name="predictions">Destination, one per index.</param>
    public void Predict(ReadOnlySpan<double> theta, ReadOnlySpan<double> features, ReadOnlySpan<int> indices, double outputScale, Span<double> predictions)
    {
        Forward(theta, features, indices);
        for (var k = 0; k < indices.Length; k++)
        {
            predictions[k] = outputScale * (_output[(2 * k) + 1] - _output[2 * k]);
        }
    }

    /// <summary>
    /// Adds ∂(Σρ)/∂θ over the samples to <paramref name="gradient"/> and returns Σρ(rₖ), rₖ = prediction − target.
    /// Residuals are written to <paramref name="residuals"/>[indices[k]] (global indexing, disjoint per chunk).
    /// </summary>
    public double AccumulateGradient(ReadOnlySpan<double> theta, ReadOnlySpan<double> features, ReadOnlySpan<int> indices,
        ReadOnlySpan<double> targets, double outputScale, TrainingLoss loss, Span<double> gradient, Span<double> residuals)
    {
        if (indices.Length == 0)
        {
            return 0;
        }

        var rows = Forward(theta, features, indices);
        var layers = _sizes.Length - 1;

        // dLoss/dOutput per row: ψ(r)·s for link b, −ψ(r)·s for link a.
        var total = 0.0;
        var deltaOut = _deltaA.AsSpan(0, rows);
        for (var k = 0; k < indices.Length; k++)
        {
            var q = indices[k];
            var prediction = outputScale * (_output[(2 * k) + 1] - _output[2 * k]);
            var r = prediction - targets[q];
            residuals[q] = r;
            total += loss.Rho(r);
            var psi = loss.Psi(r) * outputScale;
            deltaOut[2 * k] = -psi;
            deltaOut[(2 * k) + 1] = psi;
        }

        // Output layer (linear, one unit).
        var offsets = LayerOffsets(layers - 1);
        var inputs = _sizes[layers - 1];
        var hPrev = _h[layers - 1];
        for (var i = 0; i < inputs; i++)
        {
            gradient[offsets.Weights + i] += TensorPrimitives.Dot(deltaOut, (ReadOnlySpan<double>)hPrev.AsSpan(i * rows, rows));
        }

        gradient[offsets.Bias] += TensorPrimitives.Sum((ReadOnlySpan<double>)deltaOut);

        // δh of the last hidden layer = w_L[i]·δout.
        var deltaH = _deltaB;
        for (var i = 0; i < inputs; i++)
        {
            TensorPrimitives.Multiply(deltaOut, theta[offsets.Weights + i], deltaH.AsSpan(i * rows, rows));
        }

        for (var l = layers - 1; l >= 1; l--)
        {
            var units = _sizes[l];
            var fanIn = _sizes[l - 1];
            var block = units * rows;
            var dz = deltaH.AsSpan(0, block);
            var scratch = _scratch.AsSpan(0, block);
            if (_activation == BiasActivation.Tanh)
            {
                // tanh′ = 1 − h².
                var h = _h[l].AsSpan(0, block);
                TensorPrimitives.Multiply(h, h, scratch);
                TensorPrimitives.Subtract(1.0, scratch, scratch);
            }
            else
            {
                // SiLU′(z) = σ(z)·(1 + z·(1 − σ(z))).
                var z = _z[l].AsSpan(0, block);
                var sigmoid = _sigmoid.AsSpan(0, block);
                TensorPrimitives.Sigmoid(z, sigmoid);
                TensorPrimitives.Subtract(1.0, sigmoid, scratch);
                TensorPrimitives.MultiplyAdd(z, scratch, 1.0, scratch);
                TensorPrimitives.Multiply(scratch, sigmoid, scratch);
            }

            TensorPrimitives.Multiply(dz, scratch, dz);

            var layerOffsets = LayerOffsets(l - 1);
            var input = _h[l - 1];
            for (var j = 0; j < units; j++)
            {
                ReadOnlySpan<double> dzj = dz.Slice(j * rows, rows);
                var row = layerOffsets.Weights + (j * fanIn);
                for (var i = 0; i < fanIn; i++)
                {
                    gradient[row + i] += TensorPrimitives.Dot(dzj, input.AsSpan(i * rows, rows));
                }

                gradient[layerOffsets.Bias + j] += TensorPrimitives.Sum(dzj);
            }

            if (l > 1)
            {
                // δh(l−1) column i = Σⱼ W[j,i]·δz column j.
                var next = ReferenceEquals(deltaH, _deltaA) ? _deltaB : _deltaA;
                for (var i = 0; i < fanIn; i++)
                {
                    var destination = next.AsSpan(i * rows, rows);
                    TensorPrimitives.Multiply(dz[..rows], theta[layerOffsets.Weights + i], destination);
                    for (var j = 1; j < units; j++)
                    {
                        TensorPrimitives.MultiplyAdd(dz.Slice(j * rows, rows), theta[layerOffsets.Weights + (j * fanIn) + i], destination, destination);
                    }
                }

                deltaH = next;
            }
        }

        return total;
    }

    /// <summary>Offsets of layer <paramref name="layer"/>'s weights and biases in the canonical parameter vector.</summary>
    internal (int Weights, int Bias) LayerOffsets(int layer)
    {
        var offset = 0;
        for (var l = 0; l < layer; l++)
        {
            offset += (_sizes[l] + 1) * _sizes[l + 1];
        }

        return (offset, offset + (_sizes[layer] * _sizes[layer + 1]));
    }

    private int Forward(ReadOnlySpan<double> theta, ReadOnlySpan<double> features, ReadOnlySpan<int> indices)
    {
        if (indices.Length * 2 > _maxRows)
        {
            throw new ArgumentException($"at most {_maxRows / 2} samples per chunk");
        }

        var rows = 2 * indices.Length;
        var inputs = _sizes[0];
        var h0 = _h[0];

        // Gather into unit-major layout: row 2k = link a of sample k, row 2k+1 = link b.
        for (var k = 0; k < indices.Length; k++)
        {
            var source = features.Slice(indices[k] * 2 * inputs, 2 * inputs);
            for (var i = 0; i < inputs; i++)
            {
                h0[(i * rows) + (2 * k)] = source[i];
                h0[(i * rows) + (2 * k) + 1] = source[inputs + i];
            }
        }

        var layers = _sizes.Length - 1;
        for (var l = 1; l <= layers; l++)
        {
            var fanIn = _sizes[l - 1];
            var units = _sizes[l];
            var offsets = LayerOffsets(l - 1);
            var input = _h[l - 1];
            var z = l < layers ? _z[l] : _output;
            for (var j = 0; j < units; j++)
            {
                var destination = z.AsSpan(j * rows, rows);
                destination.Fill(theta[offsets.Bias + j]);
                var row = offsets.Weights + (j * fanIn);
                for (var i = 0; i < fanIn; i++)
                {
                    TensorPrimitives.MultiplyAdd(input.AsSpan(i * rows, rows), theta[row + i], destination, destination);
                }
            }

            if (l < layers)
            {
                var block = units * rows;
                var zBlock = _z[l].AsSpan(0, block);
                var hBlock = _h[l].AsSpan(0, block);
                if (_activation == BiasActivation.Tanh)
                {
                    TensorPrimitives.Tanh(zBlock, hBlock);
                }
                else
                {
                    TensorPrimitives.Sigmoid(zBlock, hBlock);
                    TensorPrimitives.Multiply(zBlock, hBlock, hBlock);
                }
            }
        }

        return rows;
    }
}
