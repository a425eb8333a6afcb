using Fleet.Server.Registry;
using Npgsql;

namespace Fleet.Server.Cluster;

/// <summary>
/// The audit log on the cluster's PostgreSQL registry database (table <c>fleet_audit_log</c>), shared by every silo.
/// Append-only like the SQLite log; sequence numbers come from one bigserial, so they increase across silos.
/// </summary>
public sealed class PostgresAuditLog : IAuditLog, IDisposable
{
    // Distinct from the registry's migration lock: the two schemas are created independently.
    private const long MigrationLockKey = 0x466C656574_03;

    private readonly NpgsqlDataSource _db;
    private readonly TimeProvider _time;

    public PostgresAuditLog(string connectionString, TimeProvider time)
    {
        _db = NpgsqlDataSource.Create(connectionString);
        _time = time;
        using var db = _db.OpenConnection();
        using var tx = db.BeginTransaction();
        using (var lockCmd = new NpgsqlCommand($"SELECT pg_advisory_xact_lock({MigrationLockKey})", db, tx))
        {
            lockCmd.ExecuteNonQuery();
        }

        using (var create = new NpgsqlCommand("""
            CREATE TABLE IF NOT EXISTS fleet_audit_log(
                seq bigserial PRIMARY KEY, time_ms bigint NOT NULL, principal text NOT NULL,
                action text NOT NULL, site_id text NOT NULL, details text NOT NULL);
            CREATE INDEX IF NOT EXISTS fleet_audit_log_site ON fleet_audit_log(site_id, seq);
            """, db, tx))
        {
            create.ExecuteNonQuery();
        }

        tx.Commit();
    }

    public AuditEntry Append(string principal, AuditAction action, string siteId, string details)
    {
        var now = _time.GetUtcNow().ToUnixTimeMilliseconds();
        using var db = _db.OpenConnection();
        using var cmd = new NpgsqlCommand(
            "INSERT INTO fleet_audit_log(time_ms, principal, action, site_id, details) VALUES (@t, @p, @a, @s, @d) RETURNING seq", db);
        cmd.Parameters.AddWithValue("t", now);
        cmd.Parameters.AddWithValue("p", principal);
        cmd.Parameters.AddWithValue("a", action.ToString());
        cmd.Parameters.AddWithValue("s", siteId);
        cmd.Parameters.AddWithValue("d", details);
        var seq = (long)cmd.ExecuteScalar()!;
        return new AuditEntry(seq, DateTimeOffset.FromUnixTimeMilliseconds(now), principal, action, siteId, details);
    }

    public IReadOnlyList<AuditEntry> List(string? siteId, IReadOnlyCollection<string>? allowedSites, long beforeSequence, int limit)
    {
        using var db = _db.OpenConnection();
        using var cmd = new NpgsqlCommand { Connection = db };
        var where = new List<string> { "seq < @before" };
        cmd.Parameters.AddWithValue("before", beforeSequence <= 0 ? long.MaxValue : beforeSequence);
        if (!string.IsNullOrEmpty(siteId))
        {
            where.Add("site_id = @site");
            cmd.Parameters.AddWithValue("site", siteId);
        }

        if (allowedSites is not null)
        {
            where.Add("site_id = ANY(@allowed)");
            cmd.Parameters.AddWithValue("allowed", allowedSites.ToArray());
        }

        cmd.CommandText = $"SELECT seq, time_ms, principal, action, site_id, details FROM fleet_audit_log WHERE {string.Join(" AND ", where)} ORDER BY seq DESC LIMIT @limit";
        cmd.Parameters.AddWithValue("limit", limit);
        using var r = cmd.ExecuteReader();
        var list = new List<AuditEntry>();
        while (r.Read())
        {
            list.Add(new AuditEntry(r.GetInt64(0), DateTimeOffset.FromUnixTimeMilliseconds(r.GetInt64(1)), r.GetString(2),
                Enum.TryParse<AuditAction>(r.GetString(3), out var action) ? action : 0, r.GetString(4), r.GetString(5)));
        }

        return list;
    }

    public void Dispose() => _db.Dispose();
}
