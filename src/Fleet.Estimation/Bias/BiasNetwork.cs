using System.Numerics;
using System.Numerics.Tensors;
using System.Runtime.InteropServices;
using Fleet.Estimation.Anchors;
using Fleet.Estimation.Geometry;

namespace Fleet.Estimation.Bias;

/// <summary>Hidden-layer activation of a <see cref="BiasNetwork"/>.</summary>
public enum BiasActivation
{
    /// <summary>
    /// tanh (default). Smooth (no kinks, so gradient checks are exact and the learned bias surface is smooth),
    /// zero-centred and bounded, which suits small networks on normalised inputs; native in ONNX (Tanh).
    /// Initialised with Glorot/Xavier uniform (Glorot &amp; Bengio 2010).
    /// </summary>
    Tanh = 0,

    /// <summary>SiLU x·σ(x): smooth ReLU-like alternative; initialised with He normal (He et al. 2015). ONNX: Sigmoid + Mul.</summary>
    SiLU = 1,
}

/// <summary>
/// Learned per-link UWB ranging bias: a fully-connected network f(features) → link bias (m), with input
/// normalisation (x − mean)/std and a linear output multiplied by <see cref="OutputScale"/>.
/// A TDOA value ddiff = |p − b| − |p − a| has bias f(link b) − f(link a); the corrected value is ddiff − bias.
/// Because only differences are observed, f is identified up to an additive constant: read single-link values
/// only relative to one another.
/// <para>
/// Parameter layout (<see cref="Parameters"/>, the file and ONNX layout): for each layer in order, its weight matrix
/// W [out × in] row-major, then its bias vector [out]. The last layer has one output.
/// </para>
/// <para>
/// Threading: an instance owns scratch buffers and is NOT thread-safe. Give each thread / robot filter its own
/// instance with <see cref="Clone"/>, which shares the (immutable) weights and allocates only small scratch buffers.
/// Inference (<see cref="PredictTdoaBias"/>, <see cref="PredictLinkBias"/>, <see cref="Evaluate"/>) is float32 and
/// allocation-free.
/// </para>
/// </summary>
public sealed class BiasNetwork : ITdoaBiasModel
{
    private readonly SharedWeights _shared;
    private readonly float[] _inputA;
    private readonly float[] _inputB;
    private readonly float[] _bufferA;
    private readonly float[] _bufferB;
    private readonly float[] _sigmoid;

    /// <summary>
    /// Builds a network from its canonical parameters (see the type remarks for the layout).
    /// </summary>
    /// <param name="featureSet">Which link features the network expects (defines the input count).</param>
    /// <param name="activation">Hidden-layer activation.</param>
    /// <param name="hiddenWidths">Widths of the hidden layers, in order (may be empty for a linear model).</param>
    /// <param name="parameters">All weights and biases, <see cref="CountParameters"/> floats.</param>
    /// <param name="inputMean">Per-feature mean subtracted before the first layer.</param>
    /// <param name="inputStd">Per-feature standard deviation divided after centring; must be finite and &gt; 0.</param>
    /// <param name="outputScale">Metres per unit of raw network output; finite and &gt; 0.</param>
    /// <exception cref="ArgumentException">Any size mismatch or non-finite value; the message says which.</exception>
    public BiasNetwork(LinkFeatureSet featureSet, BiasActivation activation, IReadOnlyList<int> hiddenWidths,
        ReadOnlySpan<float> parameters, ReadOnlySpan<float> inputMean, ReadOnlySpan<float> inputStd, float outputScale)
        : this(new SharedWeights(featureSet, activation, hiddenWidths, parameters, inputMean, inputStd, outputScale))
    {
    }

    private BiasNetwork(SharedWeights shared)
    {
        _shared = shared;
        _inputA = new float[shared.InputCount];
        _inputB = new float[shared.InputCount];

        // Each buffer holds one layer's outputs for link a (first half) and link b (second half).
        _bufferA = new float[2 * shared.MaxPaddedWidth];
        _bufferB = new float[2 * shared.MaxPaddedWidth];
        _sigmoid = new float[2 * shared.MaxPaddedWidth];
    }

    public LinkFeatureSet FeatureSet => _shared.FeatureSet;

    public BiasActivation Activation => _shared.Activation;

    /// <summary>Number of input features.</summary>
    public int InputCount => _shared.InputCount;

    public IReadOnlyList<int> HiddenWidths => _shared.HiddenWidths;

    /// <summary>Layer sizes including input and output: [inputs, hidden…, 1].</summary>
    public IReadOnlyList<int> LayerSizes => _shared.LayerSizes;

    public int ParameterCount => _shared.Parameters.Length;

    /// <summary>Canonical parameters (see the type remarks). Read-only view of the shared weights.</summary>
    public ReadOnlySpan<float> Parameters => _shared.Parameters;

    public ReadOnlySpan<float> InputMean => _shared.Mean;

    public ReadOnlySpan<float> InputStd => _shared.Std;

    /// <summary>Metres per unit of raw network output.</summary>
    public float OutputScale => _shared.OutputScale;

    /// <summary>Number of canonical parameters of a network with these layer widths and one output.</summary>
    public static int CountParameters(int inputCount, IReadOnlyList<int> hiddenWidths)
    {
        ArgumentNullException.ThrowIfNull(hiddenWidths);
        var count = 0;
        var previous = inputCount;
        for (var i = 0; i < hiddenWidths.Count; i++)
        {
            count += (previous + 1) * hiddenWidths[i];
            previous = hiddenWidths[i];
        }

        return count + previous + 1;
    }

    /// <summary>A new instance sharing this one's weights with its own scratch buffers (for another thread).</summary>
    public BiasNetwork Clone() => new(_shared);

    /// <summary>
    /// Link bias (m) for a raw (un-normalised) feature vector as written by <see cref="LinkFeatures"/>.
    /// Allocation-free; NaN features give NaN.
    /// </summary>
    public float Evaluate(ReadOnlySpan<float> features)
    {
        var count = _shared.InputCount;
        if (features.Length < count)
        {
            throw new ArgumentException($"expected {count} features", nameof(features));
        }

        features[..count].CopyTo(_inputA);
        features[..count].CopyTo(_inputB);
        return EvaluateInputs().A;
    }

    /// <summary>Link biases (m) of two raw feature vectors at once (about the cost of one <see cref="Evaluate"/>).</summary>
    public (float A, float B) EvaluatePair(ReadOnlySpan<float> featuresA, ReadOnlySpan<float> featuresB)
    {
        var count = _shared.InputCount;
        if (featuresA.Length < count || featuresB.Length < count)
        {
            throw new ArgumentException($"expected {count} features per link");
        }

        featuresA[..count].CopyTo(_inputA);
        featuresB[..count].CopyTo(_inputB);
        return EvaluateInputs();
    }

    /// <summary>Bias (m) of the single link anchor <paramref name="anchorIndex"/> → tag (defined up to a common constant).</summary>
    public double PredictLinkBias(AnchorMap map, int anchorIndex, in Vector3D tagPosition, double robotYaw)
    {
        LinkFeatures.Write(map, anchorIndex, tagPosition, robotYaw, _shared.FeatureSet, _inputA);
        _inputA.CopyTo(_inputB.AsSpan());
        return EvaluateInputs().A;
    }

    /// <summary>
    /// Bias (m) of ddiff = |p − b| − |p − a| for a tag at <paramref name="tagPosition"/> (site frame, m) on a robot with
    /// yaw <paramref name="robotYaw"/> (rad): f(link b) − f(link a). Allocation-free; not thread-safe (see <see cref="Clone"/>).
    /// NaN position or yaw gives NaN; indices must be valid for <paramref name="map"/> (the caller validates them).
    /// Measured ≈ 0.36–0.4 µs per call for 3×30 tanh on the 2-core AVX2 development machine.
    /// </summary>
    public double PredictTdoaBias(AnchorMap map, int anchorA, int anchorB, in Vector3D tagPosition, double robotYaw)
    {
        LinkFeatures.Write(map, anchorA, tagPosition, robotYaw, _shared.FeatureSet, _inputA);
        LinkFeatures.Write(map, anchorB, tagPosition, robotYaw, _shared.FeatureSet, _inputB);
        var (biasA, biasB) = EvaluateInputs();
        return (double)biasB - biasA;
    }

    /// <summary>Runs both links (<see cref="_inputA"/>, <see cref="_inputB"/>) through the network together.</summary>
    private (float A, float B) EvaluateInputs()
    {
        var shared = _shared;
        Span<float> xa = _inputA;
        Span<float> xb = _inputB;
        TensorPrimitives.Subtract(xa, shared.Mean, xa);
        TensorPrimitives.Divide(xa, shared.Std, xa);
        TensorPrimitives.Subtract(xb, shared.Mean, xb);
        TensorPrimitives.Divide(xb, shared.Std, xb);

        ReadOnlySpan<float> packed = shared.Packed;
        ReadOnlySpan<float> inputA = xa;
        ReadOnlySpan<float> inputB = xb;
        Span<float> next = _bufferA;
        Span<float> spare = _bufferB;
        var offset = 0;
        var layers = shared.HiddenWidths.Length;
        for (var layer = 0; layer < layers; layer++)
        {
            var inputs = shared.LayerSizes[layer];
            var padded = shared.PaddedWidths[layer];
            var outputA = next[..padded];
            var outputB = next.Slice(padded, padded);
            var weights = packed.Slice(offset, (inputs + 1) * padded);
            if (padded == RegisterChunks * Vector<float>.Count)
            {
                DensePairInRegisters(weights, inputs, inputA, inputB, outputA, outputB);
            }
            else
            {
                DenseInMemory(weights, inputs, padded, inputA, outputA);
                DenseInMemory(weights, inputs, padded, inputB, outputB);
            }

            // Both links in one call; padding lanes hold 0 and stay 0 under both activations.
            var both = next[..(2 * padded)];
            if (shared.Activation == BiasActivation.Tanh)
            {
                TensorPrimitives.Tanh(both, both);
            }
            else
            {
                var sigmoid = _sigmoid.AsSpan(0, 2 * padded);
                TensorPrimitives.Sigmoid(both, sigmoid);
                TensorPrimitives.Multiply(both, sigmoid, both);
            }

            offset += (inputs + 1) * padded;
            inputA = outputA;
            inputB = outputB;
            var swap = next;
            next = spare;
            spare = swap;
        }

        var lastInputs = shared.LayerSizes[layers];
        var lastWeights = packed.Slice(offset, lastInputs);
        var lastBias = packed[offset + lastInputs];
        var rawA = TensorPrimitives.Dot(lastWeights, inputA[..lastInputs]) + lastBias;
        var rawB = TensorPrimitives.Dot(lastWeights, inputB[..lastInputs]) + lastBias;
        return (rawA * shared.OutputScale, rawB * shared.OutputScale);
    }

    /// <summary>Layers at most this many vectors wide run with their accumulators held in registers.</summary>
    private const int RegisterChunks = 4;

    /// <summary>
    /// y = W·x + b for two inputs at once, W packed as Wᵀ [inputs × 4 vectors] then b [4 vectors].
    /// Gemv as a sum of weight columns scaled by each input: per input, four column loads feed eight multiply-adds
    /// (both links) into eight register accumulators. TensorPrimitives has no Gemv, and per-row Dot calls on
    /// 7–30 floats cost more in call overhead than in arithmetic.
    /// </summary>
    private static void DensePairInRegisters(ReadOnlySpan<float> weights, int inputs, ReadOnlySpan<float> xa, ReadOnlySpan<float> xb,
        Span<float> ya, Span<float> yb)
    {
        var lanes = (nuint)Vector<float>.Count;
        var stride = RegisterChunks * lanes;
        if (weights.Length < (int)((nuint)(inputs + 1) * stride) || xa.Length < inputs || xb.Length < inputs
            || ya.Length < (int)stride || yb.Length < (int)stride)
        {
            throw new InvalidOperationException("packed layer sizes are inconsistent");
        }

        ref readonly var w = ref MemoryMarshal.GetReference(weights);
        var biasOffset = (nuint)inputs * stride;
        var a0 = Vector.LoadUnsafe(in w, biasOffset);
        var a1 = Vector.LoadUnsafe(in w, biasOffset + lanes);
        var a2 = Vector.LoadUnsafe(in w, biasOffset + (2 * lanes));
        var a3 = Vector.LoadUnsafe(in w, biasOffset + (3 * lanes));
        Vector<float> b0 = a0, b1 = a1, b2 = a2, b3 = a3;
        for (var i = 0; i < inputs; i++)
        {
            var column = (nuint)i * stride;
            var c0 = Vector.LoadUnsafe(in w, column);
            var c1 = Vector.LoadUnsafe(in w, column + lanes);
            var c2 = Vector.LoadUnsafe(in w, column + (2 * lanes));
            var c3 = Vector.LoadUnsafe(in w, column + (3 * lanes));
            var va = new Vector<float>(xa[i]);
            var vb = new Vector<float>(xb[i]);
            a0 = Vector.MultiplyAddEstimate(c0, va, a0);
            a1 = Vector.MultiplyAddEstimate(c1, va, a1);
            a2 = Vector.MultiplyAddEstimate(c2, va, a2);
            a3 = Vector.MultiplyAddEstimate(c3, va, a3);
            b0 = Vector.MultiplyAddEstimate(c0, vb, b0);
            b1 = Vector.MultiplyAddEstimate(c1, vb, b1);
            b2 = Vector.MultiplyAddEstimate(c2, vb, b2);
            b3 = Vector.MultiplyAddEstimate(c3, vb, b3);
        }

        ref var da = ref MemoryMarshal.GetReference(ya);
        ref var db = ref MemoryMarshal.GetReference(yb);
        a0.StoreUnsafe(ref da, 0);
        a1.StoreUnsafe(ref da, lanes);
        a2.StoreUnsafe(ref da, 2 * lanes);
        a3.StoreUnsafe(ref da, 3 * lanes);
        b0.StoreUnsafe(ref db, 0);
        b1.StoreUnsafe(ref db, lanes);
        b2.StoreUnsafe(ref db, 2 * lanes);
        b3.StoreUnsafe(ref db, 3 * lanes);
    }

    /// <summary>y = W·x + b for wide layers (more than <see cref="RegisterChunks"/> vectors): accumulators in memory.</summary>
    private static void DenseInMemory(ReadOnlySpan<float> weights, int inputs, int padded, ReadOnlySpan<float> x, Span<float> y)
    {
        var output = y[..padded];
        weights.Slice(inputs * padded, padded).CopyTo(output);
        var accumulators = MemoryMarshal.Cast<float, Vector<float>>(output);
        var columns = MemoryMarshal.Cast<float, Vector<float>>(weights[..(inputs * padded)]);
        var chunks = accumulators.Length;
        for (var i = 0; i < inputs; i++)
        {
            var broadcast = new Vector<float>(x[i]);
            var column = columns.Slice(i * chunks, chunks);
            for (var k = 0; k < chunks; k++)
            {
                accumulators[k] = Vector.MultiplyAddEstimate(column[k], broadcast, accumulators[k]);
            }
        }
    }

    /// <summary>Immutable weights shared by clones, in canonical and inference-packed layouts.</summary>
    private sealed class SharedWeights
    {
        public SharedWeights(LinkFeatureSet featureSet, BiasActivation activation, IReadOnlyList<int> hiddenWidths,
            ReadOnlySpan<float> parameters, ReadOnlySpan<float> inputMean, ReadOnlySpan<float> inputStd, float outputScale)
        {
            ArgumentNullException.ThrowIfNull(hiddenWidths);
            if (!Enum.IsDefined(activation))
            {
                throw new ArgumentOutOfRangeException(nameof(activation), activation, "unknown activation");
            }

            FeatureSet = featureSet;
            Activation = activation;
            InputCount = LinkFeatures.CountFor(featureSet);
            var widths = new int[hiddenWidths.Count];
            for (var i = 0; i < widths.Length; i++)
            {
                widths[i] = hiddenWidths[i] > 0
                    ? hiddenWidths[i]
                    : throw new ArgumentException($"hidden layer {i} has width {hiddenWidths[i]}; widths must be positive", nameof(hiddenWidths));
            }

            HiddenWidths = widths;
            var sizes = new int[widths.Length + 2];
            sizes[0] = InputCount;
            widths.CopyTo(sizes, 1);
            sizes[^1] = 1;
            LayerSizes = sizes;

            var expected = CountParameters(InputCount, widths);
            if (parameters.Length != expected)
            {
                throw new ArgumentException($"expected {expected} parameters for layers [{string.Join(", ", sizes)}], got {parameters.Length}", nameof(parameters));
            }

            if (inputMean.Length != InputCount || inputStd.Length != InputCount)
            {
                throw new ArgumentException($"normalisation needs {InputCount} means and standard deviations, got {inputMean.Length} and {inputStd.Length}");
            }

            RequireFinite(parameters, nameof(parameters));
            RequireFinite(inputMean, nameof(inputMean));
            for (var i = 0; i < inputStd.Length; i++)
            {
                if (!float.IsFinite(inputStd[i]) || inputStd[i] <= 0)
                {
                    throw new ArgumentException($"input standard deviation {i} is {inputStd[i]}; it must be finite and > 0", nameof(inputStd));
                }
            }

            if (!float.IsFinite(outputScale) || outputScale <= 0)
            {
                throw new ArgumentException($"output scale is {outputScale}; it must be finite and > 0", nameof(outputScale));
            }

            Parameters = parameters.ToArray();
            Mean = inputMean.ToArray();
            Std = inputStd.ToArray();
            OutputScale = outputScale;

            // Packed layout per hidden layer: Wᵀ [in × padded] then bias [padded], zero-padded to whole vectors.
            var lanes = Vector<float>.Count;
            PaddedWidths = new int[widths.Length];
            var packedLength = 0;
            var maxPadded = lanes;
            for (var l = 0; l < widths.Length; l++)
            {
                // Up to RegisterChunks vectors: pad to exactly that many (register kernel); wider: whole vectors.
                var padded = widths[l] <= RegisterChunks * lanes ? RegisterChunks * lanes : (widths[l] + lanes - 1) / lanes * lanes;
                PaddedWidths[l] = padded;
                maxPadded = Math.Max(maxPadded, padded);
                packedLength += (sizes[l] + 1) * padded;
            }

            packedLength += sizes[^2] + 1;
            MaxPaddedWidth = maxPadded;
            Packed = new float[packedLength];
            var source = 0;
            var target = 0;
            for (var l = 0; l < widths.Length; l++)
            {
                int inputs = sizes[l], outputs = sizes[l + 1], padded = PaddedWidths[l];
                for (var j = 0; j < outputs; j++)
                {
                    for (var i = 0; i < inputs; i++)
                    {
                        Packed[target + (i * padded) + j] = Parameters[source + (j * inputs) + i];
                    }

                    Packed[target + (inputs * padded) + j] = Parameters[source + (outputs * inputs) + j];
                }

                source += (inputs + 1) * outputs;
                target += (inputs + 1) * padded;
            }

            Array.Copy(Parameters, source, Packed, target, sizes[^2] + 1);
        }

        public LinkFeatureSet FeatureSet { get; }

        public BiasActivation Activation { get; }

        public int InputCount { get; }

        public int[] HiddenWidths { get; }

        public int[] LayerSizes { get; }

        public int[] PaddedWidths { get; }

        public int MaxPaddedWidth { get; }

        public float[] Parameters { get; }

        public float[] Packed { get; }

        public float[] Mean { get; }

        public float[] Std { get; }

        public float OutputScale { get; }

        private static void RequireFinite(ReadOnlySpan<float> values, string name)
        {
            for (var i = 0; i < values.Length; i++)
            {
                if (!float.IsFinite(values[i]))
                {
                    throw new ArgumentException($"{name}[{i}] is {values[i]}; all values must be finite", name);
                }
            }
        }
    }
}
