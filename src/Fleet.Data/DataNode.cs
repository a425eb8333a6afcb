using System.Globalization;
using System.Text;
using System.Text.Json;
using YamlDotNet.Core;
using YamlDotNet.RepresentationModel;

namespace Fleet.Data;

internal enum DataNodeKind
{
    Object,
    Array,
    String,
    Number,
    Boolean,
    Null,
}

/// <summary>
/// A small document tree that remembers the 1-based line of every value, built from JSON or YAML, so the
/// mapping code and its error messages are shared by both formats.
/// </summary>
internal sealed class DataNode
{
    private DataNode(DataNodeKind kind, long line)
    {
        Kind = kind;
        Line = line;
    }

    public DataNodeKind Kind { get; }

    public long Line { get; }

    public string? Text { get; private init; }

    public double Number { get; private init; }

    public List<KeyValuePair<string, DataNode>> Properties { get; } = [];

    public List<DataNode> Items { get; } = [];

    public DataNode? Property(string name)
    {
        foreach (var p in Properties)
        {
            if (p.Key == name)
            {
                return p.Value;
            }
        }

        return null;
    }

    public static string KindName(DataNodeKind kind) => kind switch
    {
        DataNodeKind.Object => "an object",
        DataNodeKind.Array => "an array",
        DataNodeKind.String => "a string",
        DataNodeKind.Number => "a number",
        DataNodeKind.Boolean => "a boolean",
        _ => "null",
    };

    /// <summary>Parses JSON (comments and trailing commas allowed). Syntax errors throw <see cref="FleetDataException"/> with the line.</summary>
    public static DataNode ParseJson(byte[] utf8, string source)
    {
        var offset = utf8.AsSpan().StartsWith(Encoding.UTF8.Preamble) ? Encoding.UTF8.Preamble.Length : 0;
        var lineStarts = LineStarts(utf8);
        var reader = new Utf8JsonReader(utf8.AsSpan(offset), new JsonReaderOptions
        {
            CommentHandling = JsonCommentHandling.Skip,
            AllowTrailingCommas = true,
        });
        try
        {
            if (!reader.Read())
            {
                throw new FleetDataException(new DataDiagnostic(source, 1, DiagnosticSeverity.Error, "the file is empty"));
            }

            var root = ReadJsonValue(ref reader, offset, lineStarts, source);
            if (reader.Read())
            {
                throw new FleetDataException(new DataDiagnostic(source, LineOf(lineStarts, offset + reader.TokenStartIndex), DiagnosticSeverity.Error, "unexpected content after the document"));
            }

            return root;
        }
        catch (JsonException e)
        {
            // LineNumber is 0-based in System.Text.Json.
            var line = (e.LineNumber ?? 0) + 1;
            var message = e.Message;
            var cut = message.IndexOf(" LineNumber:", StringComparison.Ordinal);
            if (cut > 0)
            {
                message = message[..cut];
            }

            throw new FleetDataException(new DataDiagnostic(source, line, DiagnosticSeverity.Error, "invalid JSON: " + message.TrimEnd('.', ' ')), e);
        }
    }

    private static DataNode ReadJsonValue(ref Utf8JsonReader reader, int offset, long[] lineStarts, string source)
    {
        var line = LineOf(lineStarts, offset + reader.TokenStartIndex);
        switch (reader.TokenType)
        {
            case JsonTokenType.StartObject:
                {
                    var node = new DataNode(DataNodeKind.Object, line);
                    while (reader.Read() && reader.TokenType != JsonTokenType.EndObject)
                    {
                        var name = reader.GetString()!;
                        reader.Read();
                        node.Properties.Add(new(name, ReadJsonValue(ref reader, offset, lineStarts, source)));
                    }

                    return node;
                }

            case JsonTokenType.StartArray:
                {
                    var node = new DataNode(DataNodeKind.Array, line);
                    while (reader.Read() && reader.TokenType != JsonTokenType.EndArray)
                    {
                        node.Items.Add(ReadJsonValue(ref reader, offset, lineStarts, source));
                    }

                    return node;
                }

            case JsonTokenType.String:
                return new DataNode(DataNodeKind.String, line) { Text = reader.GetString() };
            case JsonTokenType.Number:
                {
                    // The whole document is one buffer, so ValueSpan holds the token.
                    // A literal too large for a double (e.g. 1e999) becomes ±∞ and is reported by the mapper as non-finite.
                    var raw = Encoding.UTF8.GetString(reader.ValueSpan);
                    var value = double.Parse(raw, NumberStyles.Float, CultureInfo.InvariantCulture);
                    return new DataNode(DataNodeKind.Number, line) { Number = value, Text = raw };
                }

            case JsonTokenType.True:
            case JsonTokenType.False:
                return new DataNode(DataNodeKind.Boolean, line) { Text = reader.TokenType == JsonTokenType.True ? "true" : "false" };
            default:
                return new DataNode(DataNodeKind.Null, line);
        }
    }

    /// <summary>Parses a YAML document (first document only). Syntax errors throw <see cref="FleetDataException"/> with the line.</summary>
    public static DataNode ParseYaml(string text, string source)
    {
        var stream = new YamlStream();
        try
        {
            stream.Load(new StringReader(text));
        }
        catch (YamlException e)
        {
            throw new FleetDataException(new DataDiagnostic(source, e.Start.Line, DiagnosticSeverity.Error, "invalid YAML: " + e.Message), e);
        }

        if (stream.Documents.Count == 0)
        {
            throw new FleetDataException(new DataDiagnostic(source, 1, DiagnosticSeverity.Error, "the file is empty"));
        }

        return FromYaml(stream.Documents[0].RootNode);
    }

    private static DataNode FromYaml(YamlNode yaml)
    {
        var line = yaml.Start.Line;
        switch (yaml)
        {
            case YamlMappingNode mapping:
                {
                    var node = new DataNode(DataNodeKind.Object, line);
                    foreach (var pair in mapping.Children)
                    {
                        var key = pair.Key is YamlScalarNode k ? k.Value ?? string.Empty : pair.Key.ToString();
                        node.Properties.Add(new(key, FromYaml(pair.Value)));
                    }

                    return node;
                }

            case YamlSequenceNode sequence:
                {
                    var node = new DataNode(DataNodeKind.Array, line);
                    foreach (var item in sequence.Children)
                    {
                        node.Items.Add(FromYaml(item));
                    }

                    return node;
                }

            case YamlScalarNode scalar:
                return FromYamlScalar(scalar, line);
            default:
                return new DataNode(DataNodeKind.Null, line);
        }
    }

    private static DataNode FromYamlScalar(YamlScalarNode scalar, long line)
    {
        var value = scalar.Value ?? string.Empty;
        if (scalar.Style is ScalarStyle.SingleQuoted or ScalarStyle.DoubleQuoted or ScalarStyle.Literal or ScalarStyle.Folded)
        {
            return new DataNode(DataNodeKind.String, line) { Text = value };
        }

        // Plain scalars follow the YAML 1.2 core schema.
        switch (value)
        {
            case "" or "~" or "null" or "Null" or "NULL":
                return new DataNode(DataNodeKind.Null, line);
            case "true" or "True" or "TRUE" or "false" or "False" or "FALSE":
                return new DataNode(DataNodeKind.Boolean, line) { Text = value.ToLowerInvariant() };
            case ".nan" or ".NaN" or ".NAN":
                return new DataNode(DataNodeKind.Number, line) { Number = double.NaN, Text = value };
            case ".inf" or ".Inf" or ".INF" or "+.inf" or "+.Inf" or "+.INF":
                return new DataNode(DataNodeKind.Number, line) { Number = double.PositiveInfinity, Text = value };
            case "-.inf" or "-.Inf" or "-.INF":
                return new DataNode(DataNodeKind.Number, line) { Number = double.NegativeInfinity, Text = value };
        }

        if (LooksNumeric(value) && double.TryParse(value, NumberStyles.Float, CultureInfo.InvariantCulture, out var number))
        {
            return new DataNode(DataNodeKind.Number, line) { Number = number, Text = value };
        }

        return new DataNode(DataNodeKind.String, line) { Text = value };
    }

    // Only plain decimal/scientific forms count as numbers ("Infinity", "NaN" and hex stay strings).
    private static bool LooksNumeric(string s)
    {
        foreach (var c in s)
        {
            if (!(char.IsAsciiDigit(c) || c is '+' or '-' or '.' or 'e' or 'E'))
            {
                return false;
            }
        }

        return s.Length > 0;
    }

    private static long[] LineStarts(byte[] utf8)
    {
        var starts = new List<long> { 0 };
        for (var i = 0; i < utf8.Length; i++)
        {
            if (utf8[i] == (byte)'\n')
            {
                starts.Add(i + 1);
            }
        }

        return [.. starts];
    }

    private static long LineOf(long[] lineStarts, long byteOffset)
    {
        var index = Array.BinarySearch(lineStarts, byteOffset);
        return (index >= 0 ? index : ~index - 1) + 1;
    }
}
