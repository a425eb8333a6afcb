using System.Security.Claims;
using System.Security.Cryptography;
using System.Text;
using System.Text.Encodings.Web;
using Microsoft.AspNetCore.Authentication;
using Microsoft.Extensions.Options;

namespace Fleet.Server.Security;

/// <summary>
/// Authenticates the <c>x-api-key</c> header against the SHA-256 hashes in <see cref="FleetSecurityOptions.ApiKeys"/>:
/// the server never holds a key itself, only its hash. A missing header is "no result" (another scheme or the
/// anonymous rule decides); a wrong key fails.
/// </summary>
public sealed class ApiKeyAuthenticationHandler(
    IOptionsMonitor<AuthenticationSchemeOptions> options,
    ILoggerFactory logger,
    UrlEncoder encoder,
    ApiKeyTable keys) : AuthenticationHandler<AuthenticationSchemeOptions>(options, logger, encoder)
{
    public const string SchemeName = "ApiKey";
    public const string HeaderName = "x-api-key";

    protected override Task<AuthenticateResult> HandleAuthenticateAsync()
    {
        if (!Request.Headers.TryGetValue(HeaderName, out var values) || values.Count == 0 || string.IsNullOrEmpty(values[0]))
        {
            return Task.FromResult(AuthenticateResult.NoResult());
        }

        var key = keys.Find(values[0]!);
        if (key is null)
        {
            return Task.FromResult(AuthenticateResult.Fail("unknown API key"));
        }

        var claims = new List<Claim> { new(ClaimTypes.Name, $"api-key:{key.Name}") };
        claims.AddRange(key.Grants.Select(g => new Claim(FleetGrant.ClaimType, g.ToString())));
        var principal = new ClaimsPrincipal(new ClaimsIdentity(claims, SchemeName, ClaimTypes.Name, ClaimTypes.Role));
        return Task.FromResult(AuthenticateResult.Success(new AuthenticationTicket(principal, SchemeName)));
    }
}

/// <summary>The configured API keys by SHA-256, with parsed grants. Invalid entries stop the server at start-up.</summary>
public sealed class ApiKeyTable
{
    private readonly Dictionary<string, ApiKeyEntry> _byHash = new(StringComparer.Ordinal);

    public ApiKeyTable(FleetSecurityOptions options)
    {
        for (var i = 0; i < options.ApiKeys.Count; i++)
        {
            var k = options.ApiKeys[i];
            var where = $"{FleetSecurityOptions.SectionName}:ApiKeys:{i}";
            if (string.IsNullOrWhiteSpace(k.Name))
            {
                throw new InvalidOperationException($"{where}:Name is required");
            }

            var hash = k.Sha256.Trim().ToLowerInvariant();
            if (hash.Length != 64 || !hash.All(char.IsAsciiHexDigit))
            {
                throw new InvalidOperationException($"{where}:Sha256 must be 64 hex digits (the SHA-256 of the key, e.g. printf %s \"$KEY\" | sha256sum)");
            }

            var grants = new List<FleetGrant>();
            foreach (var text in k.Grants)
            {
                if (!FleetGrant.TryParse(text, out var grant))
                {
                    throw new InvalidOperationException($"{where}:Grants: '{text}' is not role:site (role ingest, read or admin; site an id or *)");
                }

                grants.Add(grant);
            }

            if (!_byHash.TryAdd(hash, new ApiKeyEntry(k.Name, grants)))
            {
                throw new InvalidOperationException($"{where}: the same key hash is configured twice");
            }
        }
    }

    public ApiKeyEntry? Find(string key) =>
        _byHash.GetValueOrDefault(Convert.ToHexStringLower(SHA256.HashData(Encoding.UTF8.GetBytes(key))));

    public static string Hash(string key) => Convert.ToHexStringLower(SHA256.HashData(Encoding.UTF8.GetBytes(key)));
}

public sealed record ApiKeyEntry(string Name, IReadOnlyList<FleetGrant> Grants);
