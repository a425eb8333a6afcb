using Fleet.Server.Security;
using Grpc.Core;
using Grpc.Net.Client;
using Microsoft.IdentityModel.JsonWebTokens;
using Microsoft.IdentityModel.Tokens;

namespace Fleet.Server.Tests.Security;

/// <summary>
/// One server with TLS (test CA), API keys and a JWT issuer, shared by the security tests. Keys:
/// gateway-a (ingest:sec-a), reader-a (read:sec-a), admin-a (admin:sec-a), admin-all (admin:*).
/// </summary>
public sealed class SecureServer : IAsyncLifetime
{
    public const string Issuer = "fleet-tests";
    public const string Audience = "fleet";

    public static readonly IReadOnlyDictionary<string, (string Key, string Grants)> Keys = new Dictionary<string, (string, string)>
    {
        ["gateway-a"] = ("key-gateway-a-7c1e", "ingest:sec-a"),
        ["reader-a"] = ("key-reader-a-93fd", "read:sec-a"),
        ["admin-a"] = ("key-admin-a-1b2c", "admin:sec-a"),
        ["admin-all"] = ("key-admin-all-5e6f", "admin:*"),
    };

    // Seeded so runs are repeatable; a test secret, never a real one.
    private static readonly byte[] SigningKey = [.. Enumerable.Range(0, 32).Select(i => (byte)((i * 37) + 11))];

    private string _directory = string.Empty;

    public ServerHarness Server { get; private set; } = null!;

    public TestCertificates Certificates { get; private set; } = null!;

    public static Metadata As(string keyName) => new() { { ApiKeyAuthenticationHandler.HeaderName, Keys[keyName].Key } };

    public static Metadata Bearer(string token) => new() { { "authorization", $"Bearer {token}" } };

    public static string Token(string subject, string grants, DateTime? expires = null, byte[]? key = null) => new JsonWebTokenHandler().CreateToken(new SecurityTokenDescriptor
    {
        Issuer = Issuer,
        Audience = Audience,
        Subject = new System.Security.Claims.ClaimsIdentity([new System.Security.Claims.Claim("sub", subject), new System.Security.Claims.Claim("fleet_grants", grants)]),
        NotBefore = (expires ?? DateTime.UtcNow.AddHours(1)).AddHours(-2),
        IssuedAt = (expires ?? DateTime.UtcNow.AddHours(1)).AddHours(-2),
        Expires = expires ?? DateTime.UtcNow.AddHours(1),
        SigningCredentials = new SigningCredentials(new SymmetricSecurityKey(key ?? SigningKey), SecurityAlgorithms.HmacSha256),
    });

    public static Dictionary<string, string?> KeySettings()
    {
        var settings = new Dictionary<string, string?> { ["Fleet:Security:AllowAnonymous"] = "false" };
        var i = 0;
        foreach (var (name, (key, grants)) in Keys)
        {
            settings[$"Fleet:Security:ApiKeys:{i}:Name"] = name;
            settings[$"Fleet:Security:ApiKeys:{i}:Sha256"] = ApiKeyTable.Hash(key).ToUpperInvariant();
            settings[$"Fleet:Security:ApiKeys:{i}:Grants:0"] = grants;
            i++;
        }

        return settings;
    }

    public async Task InitializeAsync()
    {
        _directory = Path.Combine(Path.GetTempPath(), "fleet-security-tests", Guid.NewGuid().ToString("N"));
        Certificates = new TestCertificates(_directory);
        var settings = KeySettings();
        settings["Fleet:Security:Tls:CertificatePath"] = Certificates.CertificatePath;
        settings["Fleet:Security:Tls:KeyPath"] = Certificates.KeyPath;
        settings["Fleet:Security:Tls:PlaintextHealthPort"] = FreePort().ToString(System.Globalization.CultureInfo.InvariantCulture);
        settings["Fleet:Security:Jwt:Issuer"] = Issuer;
        settings["Fleet:Security:Jwt:Audience"] = Audience;
        settings["Fleet:Security:Jwt:SigningKey"] = Convert.ToBase64String(SigningKey);
        Server = await ServerHarness.StartAsync(Path.Combine(_directory, "data"), settings, new GrpcChannelOptions { HttpHandler = Certificates.ClientHandler() });
    }

    private static int FreePort()
    {
        using var listener = new System.Net.Sockets.TcpListener(System.Net.IPAddress.Loopback, 0);
        listener.Start();
        return ((System.Net.IPEndPoint)listener.LocalEndpoint).Port;
    }

    public async Task DisposeAsync()
    {
        await Server.DisposeAsync();
        Certificates.Dispose();
        try
        {
            Directory.Delete(_directory, recursive: true);
        }
        catch (IOException)
        {
            // A temp directory left behind is harmless.
        }
    }
}
