using System.Buffers.Binary;
using Fleet.Estimation.Bias;
using Google.Protobuf;

namespace Fleet.Data.BiasModels;

/// <summary>
/// Exports a <see cref="BiasNetwork"/> as an ONNX model (IR version 8, default-domain opset 17) for use outside Fleet.
/// <para>
/// Graph: input <c>features</c> float [N, F] (raw features as written by <see cref="LinkFeatures"/>) →
/// Sub(<c>input_mean</c>) → Div(<c>input_std</c>) → per hidden layer Gemm(transB = 1) and Tanh (or Sigmoid + Mul for SiLU)
/// → output Gemm → Mul(<c>output_scale</c>) → output <c>link_bias</c> float [N, 1] in metres.
/// Normalisation is kept as explicit Sub/Div nodes rather than folded into the first Gemm: the statistics stay visible
/// and the arithmetic matches Fleet's own float32 inference step for step.
/// </para>
/// <para>
/// The protobuf messages (ModelProto, GraphProto, NodeProto, TensorProto, ValueInfoProto, …) are encoded directly
/// with Google.Protobuf's <see cref="CodedOutputStream"/> using the field numbers of onnx.proto (an open standard).
/// </para>
/// </summary>
public static class OnnxExport
{
    public const string InputName = "features";
    public const string OutputName = "link_bias";
    public const long IrVersion = 8;
    public const long OpsetVersion = 17;

    // onnx.proto TensorProto.DataType.FLOAT and AttributeProto.AttributeType.INT.
    private const int FloatType = 1;
    private const int IntAttribute = 2;

    /// <summary>Writes the ONNX model to <paramref name="path"/>.</summary>
    public static void Write(string path, BiasNetwork model, string? description = null)
    {
        ArgumentException.ThrowIfNullOrEmpty(path);
        File.WriteAllBytes(path, ToBytes(model, description));
    }

    /// <summary>Writes the ONNX model to <paramref name="stream"/>.</summary>
    public static void Write(Stream stream, BiasNetwork model, string? description = null)
    {
        ArgumentNullException.ThrowIfNull(stream);
        stream.Write(ToBytes(model, description));
    }

    /// <summary>The serialised ModelProto.</summary>
    public static byte[] ToBytes(BiasNetwork model, string? description = null)
    {
        ArgumentNullException.ThrowIfNull(model);
        var sizes = model.LayerSizes;
        var parameters = model.Parameters;
        var nodes = new List<byte[]>();
        var initializers = new List<byte[]>
        {
            Tensor("input_mean", [sizes[0]], model.InputMean),
            Tensor("input_std", [sizes[0]], model.InputStd),
            Tensor("output_scale", [1], [model.OutputScale]),
        };

        nodes.Add(Node("normalise_centre", "Sub", [InputName, "input_mean"], ["features_centred"]));
        nodes.Add(Node("normalise_scale", "Div", ["features_centred", "input_std"], ["features_normalised"]));
        var current = "features_normalised";
        var offset = 0;
        for (var layer = 0; layer < sizes.Count - 1; layer++)
        {
            int inputs = sizes[layer], outputs = sizes[layer + 1];
            var weightName = $"layer{layer}_weight";
            var biasName = $"layer{layer}_bias";
            initializers.Add(Tensor(weightName, [outputs, inputs], parameters.Slice(offset, outputs * inputs)));
            initializers.Add(Tensor(biasName, [outputs], parameters.Slice(offset + (outputs * inputs), outputs)));
            offset += (inputs + 1) * outputs;

            var isOutput = layer == sizes.Count - 2;
            var linear = isOutput ? "raw_output" : $"layer{layer}_linear";
            nodes.Add(Node($"layer{layer}_gemm", "Gemm", [current, weightName, biasName], [linear], ("transB", 1)));
            if (isOutput)
            {
                current = linear;
                break;
            }

            var activated = $"layer{layer}_out";
            if (model.Activation == BiasActivation.Tanh)
            {
                nodes.Add(Node($"layer{layer}_tanh", "Tanh", [linear], [activated]));
            }
            else
            {
                var sigmoid = $"layer{layer}_sigmoid";
                nodes.Add(Node($"layer{layer}_sigmoid", "Sigmoid", [linear], [sigmoid]));
                nodes.Add(Node($"layer{layer}_silu", "Mul", [linear, sigmoid], [activated]));
            }

            current = activated;
        }

        nodes.Add(Node("output_scale_mul", "Mul", [current, "output_scale"], [OutputName]));

        var graph = Message(o =>
        {
            foreach (var node in nodes)
            {
                WriteMessage(o, 1, node);
            }

            WriteString(o, 2, "fleet_link_bias");
            foreach (var initializer in initializers)
            {
                WriteMessage(o, 5, initializer);
            }

            WriteString(o, 10, "Learned UWB link bias (m) of one anchor-tag link; TDOA bias = f(link b) - f(link a).");
            WriteMessage(o, 11, ValueInfo(InputName, "N", sizes[0]));
            WriteMessage(o, 12, ValueInfo(OutputName, "N", 1));
        });

        return Message(o =>
        {
            o.WriteTag(1, WireFormat.WireType.Varint);
            o.WriteInt64(IrVersion);
            WriteString(o, 2, "fleet");
            WriteString(o, 3, "1");
            if (!string.IsNullOrEmpty(description))
            {
                WriteString(o, 6, description);
            }

            WriteMessage(o, 7, graph);
            WriteMessage(o, 8, Message(opset =>
            {
                WriteString(opset, 1, string.Empty);
                opset.WriteTag(2, WireFormat.WireType.Varint);
                opset.WriteInt64(OpsetVersion);
            }));
            WriteMessage(o, 14, StringEntry("fleet.feature_set", model.FeatureSet.ToString()));
            WriteMessage(o, 14, StringEntry("fleet.feature_names", string.Join(",", LinkFeatures.Names)));
            WriteMessage(o, 14, StringEntry("fleet.activation", model.Activation.ToString()));
        });
    }

    /// <summary>NodeProto: input = 1, output = 2, name = 3, op_type = 4, attribute = 5.</summary>
    private static byte[] Node(string name, string opType, string[] inputs, string[] outputs, (string Name, long Value)? attribute = null) =>
        Message(o =>
        {
            foreach (var input in inputs)
            {
                WriteString(o, 1, input);
            }

            foreach (var output in outputs)
            {
                WriteString(o, 2, output);
            }

            WriteString(o, 3, name);
            WriteString(o, 4, opType);
            if (attribute is { } a)
            {
                // AttributeProto: name = 1, i = 3, type = 20.
                WriteMessage(o, 5, Message(attr =>
                {
                    WriteString(attr, 1, a.Name);
                    attr.WriteTag(3, WireFormat.WireType.Varint);
                    attr.WriteInt64(a.Value);
                    attr.WriteTag(20, WireFormat.WireType.Varint);
                    attr.WriteInt32(IntAttribute);
                }));
            }
        });

    /// <summary>TensorProto: dims = 1, data_type = 2, name = 8, raw_data = 9 (little-endian float32).</summary>
    private static byte[] Tensor(string name, long[] dims, ReadOnlySpan<float> values)
    {
        var raw = new byte[4 * values.Length];
        for (var i = 0; i < values.Length; i++)
        {
            BinaryPrimitives.WriteSingleLittleEndian(raw.AsSpan(4 * i), values[i]);
        }

        return Message(o =>
        {
            foreach (var dim in dims)
            {
                o.WriteTag(1, WireFormat.WireType.Varint);
                o.WriteInt64(dim);
            }

            o.WriteTag(2, WireFormat.WireType.Varint);
            o.WriteInt32(FloatType);
            WriteString(o, 8, name);
            o.WriteTag(9, WireFormat.WireType.LengthDelimited);
            o.WriteBytes(ByteString.CopyFrom(raw));
        });
    }

    /// <summary>
    /// ValueInfoProto (name = 1, type = 2) of a float matrix [batch, columns]: TypeProto.tensor_type = 1 →
    /// Tensor (elem_type = 1, shape = 2) → TensorShapeProto.dim = 1 → Dimension (dim_value = 1, dim_param = 2).
    /// </summary>
    private static byte[] ValueInfo(string name, string batchParameter, long columns)
    {
        var shape = Message(o =>
        {
            WriteMessage(o, 1, Message(d => WriteString(d, 2, batchParameter)));
            WriteMessage(o, 1, Message(d =>
            {
                d.WriteTag(1, WireFormat.WireType.Varint);
                d.WriteInt64(columns);
            }));
        });
        var tensorType = Message(o =>
        {
            o.WriteTag(1, WireFormat.WireType.Varint);
            o.WriteInt32(FloatType);
            WriteMessage(o, 2, shape);
        });
        return Message(o =>
        {
            WriteString(o, 1, name);
            WriteMessage(o, 2, Message(t => WriteMessage(t, 1, tensorType)));
        });
    }

    /// <summary>StringStringEntryProto: key = 1, value = 2.</summary>
    private static byte[] StringEntry(string key, string value) => Message(o =>
    {
        WriteString(o, 1, key);
        WriteString(o, 2, value);
    });

    private static byte[] Message(Action<CodedOutputStream> write)
    {
        using var buffer = new MemoryStream();
        using (var output = new CodedOutputStream(buffer, leaveOpen: true))
        {
            write(output);
        }

        return buffer.ToArray();
    }

    private static void WriteMessage(CodedOutputStream output, int field, byte[] message)
    {
        output.WriteTag(field, WireFormat.WireType.LengthDelimited);
        output.WriteBytes(ByteString.CopyFrom(message));
    }

    private static void WriteString(CodedOutputStream output, int field, string value)
    {
        output.WriteTag(field, WireFormat.WireType.LengthDelimited);
        output.WriteString(value);
    }
}
