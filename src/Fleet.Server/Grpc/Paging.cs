using System.Buffers.Text;
using System.Text;

namespace Fleet.Server.Grpc;

/// <summary>Keyset paging: the token is the last key of the previous page, base64url-encoded (opaque to clients).</summary>
internal static class Paging
{
    public const int DefaultPageSize = 100;
    public const int MaxPageSize = 1000;

    public static int Size(uint requested) => requested == 0 ? DefaultPageSize : (int)Math.Min(requested, MaxPageSize);

    public static string Token(string lastKey) => Base64Url.EncodeToString(Encoding.UTF8.GetBytes(lastKey));

    /// <summary>The key after which to continue, or null for the first page; false when the token is malformed.</summary>
    public static bool TryReadToken(string token, out string? afterKey)
    {
        afterKey = null;
        if (token.Length == 0)
        {
            return true;
        }

        try
        {
            afterKey = Encoding.UTF8.GetString(Base64Url.DecodeFromChars(token));
            return true;
        }
        catch (FormatException)
        {
            return false;
        }
    }
}
