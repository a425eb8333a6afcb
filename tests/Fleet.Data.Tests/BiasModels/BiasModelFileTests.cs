using System.Buffers.Binary;
using System.Security.Cryptography;
using Fleet.Data.BiasModels;
using Fleet.Estimation.Bias;

namespace Fleet.Data.Tests.BiasModels;

public class BiasModelFileTests
{
    [Theory]
    [InlineData(BiasActivation.Tanh, LinkFeatureSet.Full)]
    [InlineData(BiasActivation.SiLU, LinkFeatureSet.WithoutAnchorOrientation)]
    public void Read_WrittenModel_RoundTripsExactly(BiasActivation activation, LinkFeatureSet set)
    {
        var model = BiasModelFixtures.RandomNetwork(3, activation, [30, 12, 30], set);
        var metadata = BiasModelFixtures.Metadata();
        var path = Path.Combine(Path.GetTempPath(), $"fleet-roundtrip-{Guid.NewGuid():N}{BiasModelFile.Extension}");
        try
        {
            BiasModelFile.Write(path, model, metadata);
            var read = BiasModelFile.Read(path);

            // Bit-exact float round trip is the property under test, so exact comparison is intended.
            Assert.True(read.Model.Parameters.SequenceEqual(model.Parameters));
            Assert.True(read.Model.InputMean.SequenceEqual(model.InputMean));
            Assert.True(read.Model.InputStd.SequenceEqual(model.InputStd));
            Assert.Equal(BitConverter.SingleToInt32Bits(model.OutputScale), BitConverter.SingleToInt32Bits(read.Model.OutputScale));
            Assert.Equal(model.HiddenWidths, read.Model.HiddenWidths);
            Assert.Equal(activation, read.Model.Activation);
            Assert.Equal(set, read.Model.FeatureSet);
            Assert.Equal(BiasModelFile.FormatVersion, read.FormatVersion);

            Assert.Equal(metadata.Sites, read.Metadata.Sites);
            Assert.Equal(metadata.ValidationLayouts, read.Metadata.ValidationLayouts);
            Assert.Equal(metadata.SampleCounts["harbor-point-L2"], read.Metadata.SampleCounts["harbor-point-L2"]);
            Assert.Equal(metadata.ValidationSplit, read.Metadata.ValidationSplit);
            Assert.Equal(metadata.ValidationRmseAfter!.Value, read.Metadata.ValidationRmseAfter!.Value, 15);
            Assert.Equal(metadata.CreatedUtc, read.Metadata.CreatedUtc);
            Assert.Equal(metadata.Seed, read.Metadata.Seed);

            var features = new float[LinkFeatures.Count];
            features[0] = 12.5f;
            features[1] = 0.6f;
            features[3] = -0.8f;
            Assert.Equal(model.Evaluate(features), read.Model.Evaluate(features), 0f);
        }
        finally
        {
            File.Delete(path);
        }
    }

    [Fact]
    public void Read_FlippedParameterByte_ReportsChecksumMismatch()
    {
        var bytes = Bytes();
        bytes[bytes.Length - 32 - 7] ^= 0x10;
        var ex = Assert.Throws<BiasModelFileException>(() => BiasModelFile.Parse(bytes, "site-hp.fbm"));
        Assert.Contains("site-hp.fbm", ex.Message);
        Assert.Contains("checksum", ex.Message);
    }

    [Fact]
    public void Read_FlippedHeaderByte_ReportsChecksumMismatch()
    {
        var bytes = Bytes();
        bytes[40] ^= 0x01;
        var ex = Assert.Throws<BiasModelFileException>(() => BiasModelFile.Parse(bytes, "site-hp.fbm"));
        Assert.Contains("checksum", ex.Message);
    }

    [Theory]
    [InlineData(5)]
    [InlineData(14)]
    [InlineData(300)]
    [InlineData(-1)]
    public void Read_TruncatedFile_ReportsTruncation(int keep)
    {
        var bytes = Bytes();
        var length = keep < 0 ? bytes.Length - 1 : keep;
        using var stream = new MemoryStream(bytes, 0, length);
        var ex = Assert.Throws<BiasModelFileException>(() => BiasModelFile.Read(stream, "cut.fbm"));
        Assert.Contains("cut.fbm", ex.Message);
        Assert.True(ex.Message.Contains("truncated", StringComparison.Ordinal) || ex.Message.Contains("magic", StringComparison.Ordinal), ex.Message);
    }

    [Fact]
    public void Read_WrongMagic_SaysNotABiasModel()
    {
        var bytes = Bytes();
        bytes[1] = (byte)'X';
        var ex = Assert.Throws<BiasModelFileException>(() => BiasModelFile.Parse(bytes, "other.bin"));
        Assert.Contains("magic", ex.Message);
    }

    [Fact]
    public void Read_NewerVersion_SaysUnsupportedVersion()
    {
        var bytes = Bytes();
        BinaryPrimitives.WriteUInt16LittleEndian(bytes.AsSpan(8), 2);
        var ex = Assert.Throws<BiasModelFileException>(() => BiasModelFile.Parse(bytes, "future.fbm"));
        Assert.Contains("format version 2 is not supported", ex.Message);
    }

    [Fact]
    public void Read_TrailingBytes_Rejected()
    {
        var bytes = Bytes().Concat(new byte[] { 0 }).ToArray();
        var ex = Assert.Throws<BiasModelFileException>(() => BiasModelFile.Parse(bytes, "long.fbm"));
        Assert.Contains("after the checksum", ex.Message);
    }

    [Fact]
    public void Read_HeaderShapeDisagreesWithWeights_ReportsLayerShapes()
    {
        // Re-seal a file whose header claims other hidden widths: the checksum passes, the shape check must not.
        var bytes = Bytes();
        var headerLength = (int)BinaryPrimitives.ReadUInt32LittleEndian(bytes.AsSpan(12));
        var json = System.Text.Encoding.UTF8.GetString(bytes, 16, headerLength);
        var tampered = System.Text.Encoding.UTF8.GetBytes(json.Replace("\"hidden\": [\n      8,", "\"hidden\": [\n      9,", StringComparison.Ordinal));
        Assert.Contains("\"hidden\": [\n      8,", json, StringComparison.Ordinal);
        Assert.Equal(headerLength, tampered.Length);
        tampered.CopyTo(bytes, 16);
        SHA256.HashData(bytes.AsSpan(0, bytes.Length - 32), bytes.AsSpan(bytes.Length - 32));

        var ex = Assert.Throws<BiasModelFileException>(() => BiasModelFile.Parse(bytes, "reshaped.fbm"));
        Assert.Contains("need", ex.Message);
    }

    private static byte[] Bytes() => BiasModelFile.ToBytes(BiasModelFixtures.RandomNetwork(9, hidden: [8, 8]), BiasModelFixtures.Metadata());
}
