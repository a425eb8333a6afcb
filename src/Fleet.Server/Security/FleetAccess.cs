using System.Security.Claims;
using Fleet.Server.Grpc;
using Grpc.Core;

namespace Fleet.Server.Security;

/// <summary>What a credential may do on a site.</summary>
public enum FleetRole
{
    /// <summary>Send measurements.</summary>
    Ingest,

    /// <summary>Read poses, sites, maps, models, robots, anchor health.</summary>
    Read,

    /// <summary>Change sites, maps, models, robots; read the audit log. Includes <see cref="Read"/>.</summary>
    Admin,
}

/// <summary>One grant "role:site" (site "*" means every site).</summary>
public readonly record struct FleetGrant(FleetRole Role, string SiteId)
{
    public const string AllSites = "*";

    /// <summary>Claim type carrying grants on an authenticated principal.</summary>
    public const string ClaimType = "fleet_grant";

    public bool Covers(FleetRole role, string siteId) =>
        (Role == role || (Role == FleetRole.Admin && role == FleetRole.Read)) && (SiteId == AllSites || SiteId == siteId);

    public static bool TryParse(string text, out FleetGrant grant)
    {
        grant = default;
        var colon = text.IndexOf(':', StringComparison.Ordinal);
        if (colon <= 0)
        {
            return false;
        }

        FleetRole role;
        switch (text[..colon].Trim().ToLowerInvariant())
        {
            case "ingest":
                role = FleetRole.Ingest;
                break;
            case "read":
                role = FleetRole.Read;
                break;
            case "admin":
                role = FleetRole.Admin;
                break;
            default:
                return false;
        }

        var site = text[(colon + 1)..].Trim();
        if (site != AllSites && !FleetIds.IsValidSiteId(site))
        {
            return false;
        }

        grant = new FleetGrant(role, site);
        return true;
    }

    public override string ToString() => $"{Role.ToString().ToLowerInvariant()}:{SiteId}";
}

/// <summary>
/// Per-site authorisation, checked inside every RPC (the site is in the request message, so endpoint policies cannot
/// see it). A caller without a credential has full access only when anonymous access is allowed; the endpoint policy
/// already refused it otherwise.
/// </summary>
public sealed class FleetAccess(FleetSecurityOptions options)
{
    public bool Allows(ClaimsPrincipal user, FleetRole role, string siteId)
    {
        if (user.Identity?.IsAuthenticated != true)
        {
            return options.AllowAnonymous;
        }

        foreach (var claim in user.FindAll(FleetGrant.ClaimType))
        {
            if (FleetGrant.TryParse(claim.Value, out var grant) && grant.Covers(role, siteId))
            {
                return true;
            }
        }

        return false;
    }

    public bool Allows(ServerCallContext context, FleetRole role, string siteId) => Allows(User(context), role, siteId);

    /// <summary>True when the caller holds any role on the site (list calls show only such sites).</summary>
    public bool CanSee(ServerCallContext context, string siteId)
    {
        var user = User(context);
        return Allows(user, FleetRole.Read, siteId) || Allows(user, FleetRole.Ingest, siteId);
    }

    /// <summary>
    /// The sites the caller holds <paramref name="role"/> on: null for every site, otherwise the explicit list.
    /// </summary>
    public IReadOnlyCollection<string>? SitesWith(ServerCallContext context, FleetRole role)
    {
        var user = User(context);
        if (user.Identity?.IsAuthenticated != true)
        {
            return options.AllowAnonymous ? null : [];
        }

        var sites = new HashSet<string>(StringComparer.Ordinal);
        foreach (var claim in user.FindAll(FleetGrant.ClaimType))
        {
            if (FleetGrant.TryParse(claim.Value, out var grant) && grant.Covers(role, grant.SiteId))
            {
                if (grant.SiteId == FleetGrant.AllSites)
                {
                    return null;
                }

                sites.Add(grant.SiteId);
            }
        }

        return sites;
    }

    /// <summary>Throws PERMISSION_DENIED unless the caller holds <paramref name="role"/> on <paramref name="siteId"/>.</summary>
    public void Require(ServerCallContext context, FleetRole role, string siteId)
    {
        if (!Allows(context, role, siteId))
        {
            throw new RpcException(new Status(StatusCode.PermissionDenied,
                $"{Describe(context)} has no {role.ToString().ToLowerInvariant()} role on site '{siteId}'"));
        }
    }

    /// <summary>Who is calling, for the audit log: "api-key:NAME", "jwt:SUBJECT" or "anonymous@ADDRESS".</summary>
    public static string Describe(ServerCallContext context)
    {
        var user = User(context);
        if (user.Identity?.IsAuthenticated == true)
        {
            return user.Identity.Name ?? "authenticated";
        }

        return $"anonymous@{context.GetHttpContext().Connection.RemoteIpAddress}";
    }

    private static ClaimsPrincipal User(ServerCallContext context) => context.GetHttpContext().User;
}
