using System.Security.Claims;
using System.Threading.RateLimiting;
using Fleet.Grains;
using Fleet.Server.Cluster;
using Fleet.Server.Grpc;
using Fleet.Server.Registry;
using Fleet.Server.Validation;
using Microsoft.AspNetCore.Authentication;
using Microsoft.AspNetCore.Authentication.JwtBearer;
using Microsoft.IdentityModel.Tokens;

namespace Fleet.Server.Security;

/// <summary>Thrown at start-up when the server would run without authentication and nobody said that is intended.</summary>
public sealed class InsecureConfigurationException(string message) : InvalidOperationException(message);

/// <summary>Wiring of validation, authentication, per-site authorisation, rate limits and the audit log.</summary>
public static class FleetSecurityHosting
{
    public const string SchemeName = "Fleet";
    public const string CallerPolicy = "FleetCaller";

    public const string NoAuthMessage =
        "Fleet refuses to start without authentication: configure API keys (Fleet:Security:ApiKeys) or a JWT issuer " +
        "(Fleet:Security:Jwt), or allow anonymous access explicitly with Fleet:Security:AllowAnonymous=true " +
        "(`fleet serve --insecure-no-auth`; only on a trusted network). See README, section Security.";

    public static FleetSecurityOptions ReadSecurityOptions(this IConfiguration configuration) =>
        configuration.GetSection(FleetSecurityOptions.SectionName).Get<FleetSecurityOptions>() ?? new FleetSecurityOptions();

    /// <summary>Registers everything; throws <see cref="InsecureConfigurationException"/> when no authentication is configured and anonymous access was not allowed.</summary>
    public static WebApplicationBuilder AddFleetSecurity(this WebApplicationBuilder builder)
    {
        var security = builder.Configuration.ReadSecurityOptions();
        var jwt = security.Jwt;
        if (!jwt.IsConfigured && !string.IsNullOrWhiteSpace(jwt.Issuer + jwt.SigningKey + jwt.PublicKeyPath + jwt.Audience))
        {
            throw new InvalidOperationException($"{FleetSecurityOptions.SectionName}:Jwt needs Issuer and one of SigningKey or PublicKeyPath");
        }

        if (!security.HasAuthentication && !security.AllowAnonymous)
        {
            throw new InsecureConfigurationException(NoAuthMessage);
        }

        var validation = builder.Configuration.GetSection(FleetValidationOptions.SectionName).Get<FleetValidationOptions>() ?? new FleetValidationOptions();
        validation.Validate();
        var grainOptions = builder.Configuration.GetSection(FleetGrainOptions.SectionName).Get<FleetGrainOptions>() ?? new FleetGrainOptions();
        var reorder = validation.ReorderWindow?.TotalSeconds ?? grainOptions.ReorderLagSeconds ?? new Estimation.Filtering.FilterOptions().ReorderLagSeconds;

        var services = builder.Services;
        var keys = new ApiKeyTable(security);
        services.AddSingleton(security);
        services.AddSingleton(keys);
        services.AddSingleton(validation);
        services.AddSingleton(sp => new IngestBatchValidator(validation, reorder, sp.GetRequiredService<TimeProvider>()));
        services.AddSingleton<ActiveAnchorMaps>();
        services.AddSingleton<FleetAccess>();
        services.AddSingleton<ClientRateLimits>();
        // In cluster mode the audit log lives with the shared registry, so every silo lists every change.
        var cluster = builder.Configuration.GetFleetClusterOptions();
        services.AddSingleton<IAuditLog>(sp => cluster.IsCluster
            ? (IAuditLog)sp.GetRequiredService<Fleet.Grains.Registry.ISiteRegistry>()
            : new SqliteAuditLog(sp.GetRequiredService<Microsoft.Extensions.Options.IOptions<FleetServerOptions>>().Value.DataDirectory, sp.GetRequiredService<TimeProvider>()));
        services.AddGrpc().AddServiceOptions<IngestGrpcService>(o => o.MaxReceiveMessageSize = validation.MaxIngestMessageBytes);

        var authentication = services.AddAuthentication(SchemeName)
            .AddPolicyScheme(SchemeName, "API key or JWT bearer", o => o.ForwardDefaultSelector = context =>
                security.Jwt.IsConfigured && context.Request.Headers.Authorization.ToString().StartsWith("Bearer ", StringComparison.OrdinalIgnoreCase)
                    ? JwtBearerDefaults.AuthenticationScheme
                    : ApiKeyAuthenticationHandler.SchemeName)
            .AddScheme<AuthenticationSchemeOptions, ApiKeyAuthenticationHandler>(ApiKeyAuthenticationHandler.SchemeName, null);
        if (security.Jwt.IsConfigured)
        {
            authentication.AddJwtBearer(o => ConfigureJwt(o, security.Jwt));
        }

        services.AddAuthorizationBuilder().AddPolicy(CallerPolicy, p => p.AddAuthenticationSchemes(SchemeName).RequireAuthenticatedUser());
        var limits = security.RateLimit;
        services.AddRateLimiter(o =>
        {
            o.OnRejected = ClientRateLimits.RejectAsGrpc;
            if (limits.CallsPerSecond > 0)
            {
                o.GlobalLimiter = PartitionedRateLimiter.Create<HttpContext, string>(context =>
                    context.Request.Path.StartsWithSegments("/grpc.health.v1.Health") || context.Request.Path == "/metrics"
                        ? RateLimitPartition.GetNoLimiter("probes")
                        : RateLimitPartition.GetTokenBucketLimiter(ClientRateLimits.ClientKey(context),
                            _ => ClientRateLimits.BucketOptions(limits.CallsPerSecond, limits.CallBurst, queue: 0)));
            }
        });
        return builder;
    }

    /// <summary>Authentication, authorisation and rate limiting in the request pipeline (before the endpoints).</summary>
    public static WebApplication UseFleetSecurity(this WebApplication app)
    {
        var tls = app.Services.GetRequiredService<FleetSecurityOptions>().Tls;
        if (tls.IsConfigured && tls.PlaintextHealthPort > 0)
        {
            // The plaintext probe port answers health checks and nothing else.
            var probePort = tls.PlaintextHealthPort;
            app.Use((context, next) =>
            {
                if (context.Connection.LocalPort == probePort && !context.Request.Path.StartsWithSegments("/grpc.health.v1.Health"))
                {
                    context.Response.StatusCode = StatusCodes.Status404NotFound;
                    return Task.CompletedTask;
                }

                return next(context);
            });
        }

        app.UseAuthentication();
        app.UseAuthorization();
        app.UseRateLimiter();
        return app;
    }

    /// <summary>
    /// Maps the Fleet services, requiring an authenticated caller unless anonymous access is allowed. Health stays
    /// anonymous for probes; reflection needs a credential like the services it describes.
    /// </summary>
    public static WebApplication MapFleetGrpcServices(this WebApplication app)
    {
        var security = app.Services.GetRequiredService<FleetSecurityOptions>();
        var endpoints = new[]
        {
            app.MapGrpcService<IngestGrpcService>(),
            app.MapGrpcService<PoseGrpcService>(),
            app.MapGrpcService<SiteGrpcService>(),
            app.MapGrpcService<AuditGrpcService>(),
            app.MapGrpcReflectionService(),
        };
        if (!security.AllowAnonymous)
        {
            foreach (var endpoint in endpoints)
            {
                endpoint.RequireAuthorization(CallerPolicy);
            }
        }

        app.MapGrpcHealthChecksService().AllowAnonymous();
        return app;
    }

    private static void ConfigureJwt(JwtBearerOptions o, JwtOptions jwt)
    {
        SecurityKey key;
        if (!string.IsNullOrWhiteSpace(jwt.SigningKey))
        {
            key = new SymmetricSecurityKey(Convert.FromBase64String(jwt.SigningKey));
        }
        else
        {
            var pem = File.ReadAllText(jwt.PublicKeyPath!);
            if (pem.Contains("BEGIN EC", StringComparison.Ordinal) || TryEcdsa(pem) is not null)
            {
                key = new ECDsaSecurityKey(TryEcdsa(pem) ?? throw new InvalidOperationException($"{FleetSecurityOptions.SectionName}:Jwt:PublicKeyPath is not a usable EC key"));
            }
            else
            {
                var rsa = System.Security.Cryptography.RSA.Create();
                rsa.ImportFromPem(pem);
                key = new RsaSecurityKey(rsa);
            }
        }

        o.MapInboundClaims = false;
        o.TokenValidationParameters = new TokenValidationParameters
        {
            ValidIssuer = jwt.Issuer,
            ValidateAudience = !string.IsNullOrWhiteSpace(jwt.Audience),
            ValidAudience = jwt.Audience,
            IssuerSigningKey = key,
            ValidateLifetime = true,
            RequireExpirationTime = true,
            ClockSkew = TimeSpan.FromSeconds(30),
            NameClaimType = "sub",
        };
        o.Events = new JwtBearerEvents
        {
            OnTokenValidated = context =>
            {
                // Token grants become the same claims API keys carry; malformed ones are dropped (they grant nothing).
                var identity = new ClaimsIdentity(SchemeName, ClaimTypes.Name, ClaimTypes.Role);
                identity.AddClaim(new Claim(ClaimTypes.Name, $"jwt:{context.Principal?.FindFirst("sub")?.Value ?? "unknown"}"));
                foreach (var claim in context.Principal?.FindAll(jwt.GrantsClaim) ?? [])
                {
                    foreach (var text in claim.Value.Split(' ', StringSplitOptions.RemoveEmptyEntries))
                    {
                        if (FleetGrant.TryParse(text, out var grant))
                        {
                            identity.AddClaim(new Claim(FleetGrant.ClaimType, grant.ToString()));
                        }
                    }
                }

                context.Principal = new ClaimsPrincipal(identity);
                return Task.CompletedTask;
            },
        };
    }

    private static System.Security.Cryptography.ECDsa? TryEcdsa(string pem)
    {
        try
        {
            var ec = System.Security.Cryptography.ECDsa.Create();
            ec.ImportFromPem(pem);
            return ec;
        }
        catch (Exception e) when (e is ArgumentException or System.Security.Cryptography.CryptographicException)
        {
            return null;
        }
    }
}
