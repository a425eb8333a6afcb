namespace Fleet.Server.Security;

/// <summary>
/// Transport security, authentication, roles, rate limits (configuration section <c>Fleet:Security</c>). Without any
/// API key or JWT issuer the server refuses to start unless <see cref="AllowAnonymous"/> says so explicitly.
/// </summary>
public sealed class FleetSecurityOptions
{
    public const string SectionName = "Fleet:Security";

    /// <summary>
    /// Serve callers that present no credential, with full access. For loopback demos and tests only; `fleet demo`
    /// sets it, `fleet serve --insecure-no-auth` sets it.
    /// </summary>
    public bool AllowAnonymous { get; set; }

    /// <summary>TLS certificate of the gRPC endpoint; unset serves plaintext HTTP/2 (h2c).</summary>
    public TlsOptions Tls { get; set; } = new();

    /// <summary>API keys: a caller sends the key in the <c>x-api-key</c> header; only its SHA-256 is configured.</summary>
    public List<ApiKeyOptions> ApiKeys { get; set; } = [];

    /// <summary>JWT bearer tokens (<c>authorization: Bearer …</c>) from an issuer you run.</summary>
    public JwtOptions Jwt { get; set; } = new();

    /// <summary>Per-client rate limits.</summary>
    public RateLimitOptions RateLimit { get; set; } = new();

    /// <summary>True when at least one way to authenticate is configured.</summary>
    public bool HasAuthentication => ApiKeys.Count > 0 || Jwt.IsConfigured;
}

/// <summary>Certificate of the gRPC endpoint: a PFX/PKCS#12 file (with <see cref="Password"/>) or a PEM certificate with its PEM key.</summary>
public sealed class TlsOptions
{
    /// <summary>Path of a .pfx/.p12 file, or of a PEM certificate (chain) file.</summary>
    public string? CertificatePath { get; set; }

    /// <summary>PEM private key for a PEM certificate (unset: the key is in the certificate file).</summary>
    public string? KeyPath { get; set; }

    /// <summary>Password of the PFX file or of an encrypted PEM key.</summary>
    public string? Password { get; set; }

    /// <summary>
    /// With TLS on: a plaintext HTTP/2 port serving only grpc.health.v1 (Kubernetes gRPC probes speak neither TLS nor
    /// credentials). 0 or negative: none.
    /// </summary>
    public int PlaintextHealthPort { get; set; }

    public bool IsConfigured => !string.IsNullOrWhiteSpace(CertificatePath);
}

/// <summary>One API key: who it is, the SHA-256 of the key (lower- or upper-case hex), and its grants.</summary>
public sealed class ApiKeyOptions
{
    /// <summary>Name recorded in the audit log and used as the rate-limit partition, e.g. "gateway-hp-north".</summary>
    public string Name { get; set; } = string.Empty;

    /// <summary>Hex SHA-256 of the key's UTF-8 bytes (`printf %s "$KEY" | sha256sum`).</summary>
    public string Sha256 { get; set; } = string.Empty;

    /// <summary>Grants "role:site": role ingest, read or admin; site a site id or "*" for every site. Admin includes read.</summary>
    public List<string> Grants { get; set; } = [];
}

/// <summary>JWT bearer validation. Grants come from the <see cref="GrantsClaim"/> claim (one "role:site" per value).</summary>
public sealed class JwtOptions
{
    /// <summary>Required "iss".</summary>
    public string? Issuer { get; set; }

    /// <summary>Required "aud".</summary>
    public string? Audience { get; set; }

    /// <summary>Base64 symmetric key for HS256 tokens.</summary>
    public string? SigningKey { get; set; }

    /// <summary>PEM file with the issuer's RSA or ECDSA public key (RS256/ES256 tokens).</summary>
    public string? PublicKeyPath { get; set; }

    /// <summary>Claim that carries the grants. Default "fleet_grants".</summary>
    public string GrantsClaim { get; set; } = "fleet_grants";

    public bool IsConfigured => !string.IsNullOrWhiteSpace(Issuer) && (!string.IsNullOrWhiteSpace(SigningKey) || !string.IsNullOrWhiteSpace(PublicKeyPath));
}

/// <summary>
/// Token buckets per client (its API key name or JWT subject; the remote address for anonymous callers). A call over the
/// limit fails RESOURCE_EXHAUSTED; a stream message over the limit waits for a token up to the burst, then fails the
/// stream RESOURCE_EXHAUSTED with a retry delay. 0 turns a limit off.
/// </summary>
public sealed class RateLimitOptions
{
    /// <summary>Calls (unary calls and stream starts) per second per client. Default 500.</summary>
    public int CallsPerSecond { get; set; } = 500;

    /// <summary>Calls a client may make at once above the steady rate. Default 1000.</summary>
    public int CallBurst { get; set; } = 1000;

    /// <summary>Ingest stream messages (batches) per second per client. Default 500.</summary>
    public int StreamMessagesPerSecond { get; set; } = 500;

    /// <summary>Stream messages above the steady rate. Default 1000.</summary>
    public int StreamMessageBurst { get; set; } = 1000;
}
