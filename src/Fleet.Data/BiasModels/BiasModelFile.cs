using System.Buffers.Binary;
using System.Security.Cryptography;
using System.Text;
using System.Text.Json;
using System.Text.Json.Serialization;
using Fleet.Estimation.Bias;

namespace Fleet.Data.BiasModels;

/// <summary>A model read from a file together with its training metadata.</summary>
public sealed record BiasModelFileContents(BiasNetwork Model, BiasModelMetadata Metadata, int FormatVersion);

/// <summary>
/// Fleet's own versioned binary format for learned bias models (".fbm"). All integers little-endian.
/// <code>
/// offset  size  content
/// 0       8     magic 0x89 'F' 'B' 'M' '\r' '\n' 0x1A '\n' (the 0x89 and CR/LF catch 7-bit and newline-mangling transfers)
/// 8       2     format version (1)
/// 10      2     flags, 0
/// 12      4     header length H (bytes)
/// 16      H     UTF-8 JSON header: architecture, activation, feature set, normalisation, output scale, training metadata
/// 16+H    4     parameter count P
/// 20+H    4·P   float32 parameters: per layer W [out × in] row-major, then b [out] (see <see cref="BiasNetwork"/>)
/// 20+H+4P 32    SHA-256 of every byte before it
/// </code>
/// <see cref="Read(string)"/> checks magic, version, declared sizes against the file length, the checksum, then the
/// header and every shape, and throws <see cref="BiasModelFileException"/> on the first problem.
/// </summary>
public static class BiasModelFile
{
    /// <summary>Format version this build writes and reads.</summary>
    public const ushort FormatVersion = 1;

    /// <summary>Conventional file extension.</summary>
    public const string Extension = ".fbm";

    /// <summary>Files larger than this are refused before reading (a 3×30 model is ~10 KB).</summary>
    public const long MaximumFileBytes = 64L * 1024 * 1024;

    private const int FixedHeaderBytes = 16;
    private const int ChecksumBytes = 32;
    private const string FormatName = "fleet-bias-model";

    private static readonly byte[] Magic = [0x89, (byte)'F', (byte)'B', (byte)'M', (byte)'\r', (byte)'\n', 0x1A, (byte)'\n'];

    private static readonly JsonSerializerOptions JsonOptions = new()
    {
        PropertyNamingPolicy = JsonNamingPolicy.SnakeCaseLower,
        WriteIndented = true,
        Converters = { new JsonStringEnumConverter() },
        UnmappedMemberHandling = JsonUnmappedMemberHandling.Skip,
    };

    /// <summary>Writes <paramref name="model"/> to <paramref name="path"/> via a temporary file, so a crash never leaves half a file.</summary>
    public static void Write(string path, BiasNetwork model, BiasModelMetadata metadata)
    {
        ArgumentException.ThrowIfNullOrEmpty(path);
        var temporary = path + ".tmp";
        using (var stream = File.Create(temporary))
        {
            Write(stream, model, metadata);
        }

        File.Move(temporary, path, overwrite: true);
    }

    /// <summary>Writes <paramref name="model"/> and <paramref name="metadata"/> to <paramref name="stream"/>.</summary>
    public static void Write(Stream stream, BiasNetwork model, BiasModelMetadata metadata)
    {
        ArgumentNullException.ThrowIfNull(stream);
        var bytes = ToBytes(model, metadata);
        stream.Write(bytes);
    }

    /// <summary>The complete file content for <paramref name="model"/>.</summary>
    public static byte[] ToBytes(BiasNetwork model, BiasModelMetadata metadata)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentNullException.ThrowIfNull(metadata);
        var header = new Header
        {
            Format = FormatName,
            Architecture = new ArchitectureHeader
            {
                Inputs = model.InputCount,
                Hidden = [.. model.HiddenWidths],
                Outputs = 1,
                Activation = model.Activation,
                ParameterCount = model.ParameterCount,
                ParameterLayout = "per layer: W[out][in] row-major, then b[out]; float32 little-endian",
            },
            Features = new FeatureHeader { Set = model.FeatureSet, Names = [.. LinkFeatures.Names] },
            Normalisation = new NormalisationHeader { Mean = model.InputMean.ToArray(), Std = model.InputStd.ToArray() },
            OutputScale = model.OutputScale,
            Training = metadata,
        };
        var json = JsonSerializer.SerializeToUtf8Bytes(header, JsonOptions);
        var parameters = model.Parameters;
        var total = FixedHeaderBytes + json.Length + 4 + (4 * parameters.Length) + ChecksumBytes;
        var bytes = new byte[total];
        var span = bytes.AsSpan();
        Magic.CopyTo(span);
        BinaryPrimitives.WriteUInt16LittleEndian(span[8..], FormatVersion);
        BinaryPrimitives.WriteUInt16LittleEndian(span[10..], 0);
        BinaryPrimitives.WriteUInt32LittleEndian(span[12..], (uint)json.Length);
        json.CopyTo(span[FixedHeaderBytes..]);
        var offset = FixedHeaderBytes + json.Length;
        BinaryPrimitives.WriteUInt32LittleEndian(span[offset..], (uint)parameters.Length);
        offset += 4;
        for (var i = 0; i < parameters.Length; i++)
        {
            BinaryPrimitives.WriteSingleLittleEndian(span[(offset + (4 * i))..], parameters[i]);
        }

        offset += 4 * parameters.Length;
        SHA256.HashData(span[..offset], span[offset..]);
        return bytes;
    }

    /// <summary>Reads and fully validates a model file.</summary>
    /// <exception cref="BiasModelFileException">Corrupt, truncated, foreign or inconsistent file.</exception>
    /// <exception cref="FileNotFoundException">No such file.</exception>
    public static BiasModelFileContents Read(string path)
    {
        ArgumentException.ThrowIfNullOrEmpty(path);
        var info = new FileInfo(path);
        if (!info.Exists)
        {
            throw new FileNotFoundException($"bias model file '{path}' does not exist", path);
        }

        if (info.Length > MaximumFileBytes)
        {
            throw new BiasModelFileException(path, $"{info.Length} bytes is larger than the {MaximumFileBytes} byte limit for model files");
        }

        return Parse(File.ReadAllBytes(path), path);
    }

    /// <summary>Reads and fully validates a model from <paramref name="stream"/>; <paramref name="name"/> appears in errors.</summary>
    public static BiasModelFileContents Read(Stream stream, string name = "<stream>")
    {
        ArgumentNullException.ThrowIfNull(stream);
        using var buffer = new MemoryStream();
        var chunk = new byte[81920];
        int read;
        while ((read = stream.Read(chunk, 0, chunk.Length)) > 0)
        {
            if (buffer.Length + read > MaximumFileBytes)
            {
                throw new BiasModelFileException(name, $"more than the {MaximumFileBytes} byte limit for model files");
            }

            buffer.Write(chunk, 0, read);
        }

        return Parse(buffer.ToArray(), name);
    }

    /// <summary>Validates and decodes complete file content.</summary>
    public static BiasModelFileContents Parse(ReadOnlySpan<byte> bytes, string name)
    {
        if (bytes.Length < Magic.Length || !bytes[..Magic.Length].SequenceEqual(Magic))
        {
            throw new BiasModelFileException(name, "not a Fleet bias model (wrong magic bytes)");
        }

        if (bytes.Length < FixedHeaderBytes)
        {
            throw new BiasModelFileException(name, $"truncated: {bytes.Length} bytes, shorter than the {FixedHeaderBytes} byte fixed header");
        }

        var version = BinaryPrimitives.ReadUInt16LittleEndian(bytes[8..]);
        if (version != FormatVersion)
        {
            throw new BiasModelFileException(name, $"format version {version} is not supported (this build reads version {FormatVersion})");
        }

        var flags = BinaryPrimitives.ReadUInt16LittleEndian(bytes[10..]);
        if (flags != 0)
        {
            throw new BiasModelFileException(name, $"unknown flags 0x{flags:X4} (corrupt or written by a newer build)");
        }

        var headerLength = (long)BinaryPrimitives.ReadUInt32LittleEndian(bytes[12..]);
        var countOffset = FixedHeaderBytes + headerLength;
        if (countOffset + 4 > bytes.Length)
        {
            throw new BiasModelFileException(name,
                $"truncated or corrupt: the header declares {headerLength} JSON bytes but the file has only {bytes.Length} bytes");
        }

        var parameterCount = (long)BinaryPrimitives.ReadUInt32LittleEndian(bytes[(int)countOffset..]);
        var expected = countOffset + 4 + (4 * parameterCount) + ChecksumBytes;
        if (expected > bytes.Length)
        {
            throw new BiasModelFileException(name,
                $"truncated or corrupt: its sizes need {expected} bytes ({parameterCount} parameters) but the file has {bytes.Length}");
        }

        if (expected < bytes.Length)
        {
            throw new BiasModelFileException(name, $"{bytes.Length - expected} unexpected bytes after the checksum");
        }

        var body = bytes[..(int)(expected - ChecksumBytes)];
        Span<byte> actual = stackalloc byte[ChecksumBytes];
        SHA256.HashData(body, actual);
        if (!actual.SequenceEqual(bytes[(int)(expected - ChecksumBytes)..]))
        {
            throw new BiasModelFileException(name, "SHA-256 checksum mismatch: the file is corrupt or was modified");
        }

        Header header;
        try
        {
            header = JsonSerializer.Deserialize<Header>(bytes.Slice(FixedHeaderBytes, (int)headerLength), JsonOptions)
                ?? throw new JsonException("the header is null");
        }
        catch (JsonException ex)
        {
            throw new BiasModelFileException(name, $"header is not valid JSON for this format: {ex.Message}", ex);
        }

        if (header.Format != FormatName || header.Architecture is null || header.Features is null || header.Normalisation is null)
        {
            throw new BiasModelFileException(name, $"header lacks format '{FormatName}', architecture, features or normalisation");
        }

        var architecture = header.Architecture;
        var hidden = architecture.Hidden ?? [];
        int inputs;
        try
        {
            inputs = LinkFeatures.CountFor(header.Features.Set);
        }
        catch (ArgumentOutOfRangeException)
        {
            throw new BiasModelFileException(name, $"unknown feature set {header.Features.Set}");
        }

        if (architecture.Inputs != inputs || architecture.Outputs != 1)
        {
            throw new BiasModelFileException(name,
                $"architecture has {architecture.Inputs} inputs and {architecture.Outputs} outputs; feature set {header.Features.Set} needs {inputs} and 1");
        }

        if (hidden.Any(w => w <= 0 || w > 1_000_000))
        {
            throw new BiasModelFileException(name, $"hidden widths [{string.Join(", ", hidden)}] are not all positive");
        }

        var needed = BiasNetwork.CountParameters(inputs, hidden);
        if (needed != parameterCount || architecture.ParameterCount != parameterCount)
        {
            throw new BiasModelFileException(name,
                $"layers [{inputs}, {string.Join(", ", hidden)}, 1] need {needed} parameters; the header says {architecture.ParameterCount} and the file holds {parameterCount}");
        }

        var parameters = new float[parameterCount];
        var data = bytes[((int)countOffset + 4)..];
        for (var i = 0; i < parameters.Length; i++)
        {
            parameters[i] = BinaryPrimitives.ReadSingleLittleEndian(data[(4 * i)..]);
        }

        BiasNetwork model;
        try
        {
            model = new BiasNetwork(header.Features.Set, architecture.Activation, hidden, parameters,
                header.Normalisation.Mean ?? [], header.Normalisation.Std ?? [], header.OutputScale);
        }
        catch (ArgumentException ex)
        {
            throw new BiasModelFileException(name, $"inconsistent model: {ex.Message}", ex);
        }

        return new BiasModelFileContents(model, header.Training ?? new BiasModelMetadata(), version);
    }

    private sealed class Header
    {
        public string? Format { get; set; }

        public ArchitectureHeader? Architecture { get; set; }

        public FeatureHeader? Features { get; set; }

        public NormalisationHeader? Normalisation { get; set; }

        public float OutputScale { get; set; }

        public BiasModelMetadata? Training { get; set; }
    }

    private sealed class ArchitectureHeader
    {
        public int Inputs { get; set; }

        public int[]? Hidden { get; set; }

        public int Outputs { get; set; }

        public BiasActivation Activation { get; set; }

        public long ParameterCount { get; set; }

        public string? ParameterLayout { get; set; }
    }

    private sealed class FeatureHeader
    {
        public LinkFeatureSet Set { get; set; }

        public string[]? Names { get; set; }
    }

    private sealed class NormalisationHeader
    {
        public float[]? Mean { get; set; }

        public float[]? Std { get; set; }
    }
}
