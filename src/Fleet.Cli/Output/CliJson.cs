using System.Text.Encodings.Web;
using System.Text.Json;

namespace Fleet.Cli.Output;

internal static class CliJson
{
    public static readonly JsonSerializerOptions Options = new()
    {
        WriteIndented = true,
        Encoder = JavaScriptEncoder.UnsafeRelaxedJsonEscaping,
        NumberHandling = System.Text.Json.Serialization.JsonNumberHandling.AllowNamedFloatingPointLiterals,
    };

    /// <summary>Rounds for human-sized JSON; NaN stays NaN (written as "NaN").</summary>
    public static double Round(double value, int digits = 4) => double.IsFinite(value) ? Math.Round(value, digits) : value;

    public static string Serialize(object value) => JsonSerializer.Serialize(value, Options);
}
