using Fleet.Contracts.V1;
using Fleet.Server.Registry;
using Fleet.Server.Security;
using Grpc.Core;
using AuditAction = Fleet.Contracts.V1.AuditAction;
using AuditEntry = Fleet.Contracts.V1.AuditEntry;

namespace Fleet.Server.Grpc;

/// <summary>Reads the audit log. Admins see the entries of the sites they administer.</summary>
internal sealed class AuditGrpcService(IAuditLog audit, FleetAccess access) : AuditService.AuditServiceBase
{
    public override Task<ListAuditEntriesResponse> ListAuditEntries(ListAuditEntriesRequest request, ServerCallContext context)
    {
        var violations = new Violations();
        if (request.SiteId.Length > 0)
        {
            violations.SiteId("site_id", request.SiteId);
        }

        long before = 0;
        if (!Paging.TryReadToken(request.PageToken, out var after) || (after is not null && (!long.TryParse(after, out before) || before <= 0)))
        {
            violations.Add("page_token", "is not a token this server issued");
        }

        violations.ThrowIfAny();
        IReadOnlyCollection<string>? allowed;
        if (request.SiteId.Length > 0)
        {
            access.Require(context, FleetRole.Admin, request.SiteId);
            allowed = null;
        }
        else
        {
            allowed = access.SitesWith(context, FleetRole.Admin);
            if (allowed is { Count: 0 })
            {
                throw new RpcException(new global::Grpc.Core.Status(StatusCode.PermissionDenied, $"{FleetAccess.Describe(context)} administers no site"));
            }
        }

        var size = Paging.Size(request.PageSize);
        var page = audit.List(request.SiteId, allowed, before, size + 1);
        var response = new ListAuditEntriesResponse();
        foreach (var e in page.Take(size))
        {
            response.Entries.Add(new AuditEntry
            {
                Sequence = (ulong)e.Sequence,
                ChangeTime = ProtoTime.FromDateTime(e.Time),
                Principal = e.Principal,
                Action = (AuditAction)(int)e.Action,
                SiteId = e.SiteId,
                Details = e.Details,
            });
        }

        if (page.Count > size)
        {
            response.NextPageToken = Paging.Token(page[size - 1].Sequence.ToString(System.Globalization.CultureInfo.InvariantCulture));
        }

        return Task.FromResult(response);
    }
}
