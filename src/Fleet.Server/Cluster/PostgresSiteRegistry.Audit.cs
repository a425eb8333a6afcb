using Fleet.Server.Registry;

namespace Fleet.Server.Cluster;

/// <summary>The audit log in <c>fleet_audit_log</c>: append-only, one bigserial sequence across all silos.</summary>
public sealed partial class PostgresSiteRegistry
{
    public AuditEntry Append(string principal, AuditAction action, string siteId, string details)
    {
        var now = Now();
        using var db = _db.OpenConnection();
        using var cmd = Command(db, null, "INSERT INTO fleet_audit_log(time_ms, principal, action, site_id, details) VALUES (@t, @p, @a, @s, @d) RETURNING seq",
            ("t", now), ("p", principal), ("a", action.ToString()), ("s", siteId), ("d", details));
        var seq = (long)cmd.ExecuteScalar()!;
        return new AuditEntry(seq, DateTimeOffset.FromUnixTimeMilliseconds(now), principal, action, siteId, details);
    }

    public IReadOnlyList<AuditEntry> List(string? siteId, IReadOnlyCollection<string>? allowedSites, long beforeSequence, int limit)
    {
        var where = new List<string> { "seq < @before" };
        var parameters = new List<(string Name, object Value)> { ("before", beforeSequence <= 0 ? long.MaxValue : beforeSequence), ("limit", limit) };
        if (!string.IsNullOrEmpty(siteId))
        {
            where.Add("site_id = @site");
            parameters.Add(("site", siteId));
        }

        if (allowedSites is not null)
        {
            where.Add("site_id = ANY(@allowed)");
            parameters.Add(("allowed", allowedSites.ToArray()));
        }

        using var db = _db.OpenConnection();
        using var cmd = Command(db, null, $"SELECT {AuditEntry.Columns} FROM fleet_audit_log WHERE {string.Join(" AND ", where)} ORDER BY seq DESC LIMIT @limit",
            [.. parameters]);
        using var r = cmd.ExecuteReader();
        return AuditEntry.Read(r);
    }
}
