using Microsoft.Data.Sqlite;

namespace Fleet.Server.Registry;

/// <summary>What an audited admin change did.</summary>
public enum AuditAction
{
    CreateSite = 1,
    PutAnchorMap = 2,
    UploadBiasModel = 3,
    ActivateBiasModel = 4,
    RollBackBiasModel = 5,
    PutRobot = 6,
}

/// <summary>One audited change: sequence (increasing), UTC time, who, what, which site, and a human-readable summary.</summary>
public sealed record AuditEntry(long Sequence, DateTimeOffset Time, string Principal, AuditAction Action, string SiteId, string Details)
{
    /// <summary>The SELECT list both audit tables are read with, in the order <see cref="Read"/> expects.</summary>
    public const string Columns = "seq, time_ms, principal, action, site_id, details";

    /// <summary>Reads every row of a query over <see cref="Columns"/>.</summary>
    public static List<AuditEntry> Read(System.Data.Common.DbDataReader r)
    {
        var list = new List<AuditEntry>();
        while (r.Read())
        {
            list.Add(new AuditEntry(r.GetInt64(0), DateTimeOffset.FromUnixTimeMilliseconds(r.GetInt64(1)), r.GetString(2),
                Enum.TryParse<AuditAction>(r.GetString(3), out var action) ? action : 0, r.GetString(4), r.GetString(5)));
        }

        return list;
    }
}

/// <summary>
/// The append-only log of admin changes: on SQLite beside the embedded registry, on PostgreSQL in cluster mode so a
/// change made through any silo is listed through every silo.
/// </summary>
public interface IAuditLog
{
    AuditEntry Append(string principal, AuditAction action, string siteId, string details);

    /// <summary>
    /// Newest first: entries with sequence below <paramref name="beforeSequence"/> (0: from the newest), of
    /// <paramref name="siteId"/> when given, and only of <paramref name="allowedSites"/> when that is not null.
    /// </summary>
    IReadOnlyList<AuditEntry> List(string? siteId, IReadOnlyCollection<string>? allowedSites, long beforeSequence, int limit);
}

/// <summary>
/// The audit log of admin changes, in its own table of the registry's SQLite file (<see cref="SqliteSiteRegistry.FileName"/>).
/// Append-only: the server never updates or deletes a row. A change is logged after the registry committed it.
/// </summary>
public sealed class SqliteAuditLog : IAuditLog
{
    private readonly string _connectionString;
    private readonly TimeProvider _time;

    public SqliteAuditLog(string dataDirectory, TimeProvider time)
    {
        Directory.CreateDirectory(dataDirectory);
        var path = Path.GetFullPath(Path.Combine(dataDirectory, SqliteSiteRegistry.FileName));
        _connectionString = new SqliteConnectionStringBuilder { DataSource = path, Pooling = true, DefaultTimeout = 30 }.ToString();
        _time = time;
        using var db = Open();
        using var cmd = db.CreateCommand();
        cmd.CommandText = """
            CREATE TABLE IF NOT EXISTS audit_log(
                seq INTEGER PRIMARY KEY AUTOINCREMENT, time_ms INTEGER NOT NULL, principal TEXT NOT NULL,
                action TEXT NOT NULL, site_id TEXT NOT NULL, details TEXT NOT NULL);
            CREATE INDEX IF NOT EXISTS audit_log_site ON audit_log(site_id, seq);
            """;
        cmd.ExecuteNonQuery();
    }

    public AuditEntry Append(string principal, AuditAction action, string siteId, string details)
    {
        var now = _time.GetUtcNow().ToUnixTimeMilliseconds();
        using var db = Open();
        using var cmd = db.CreateCommand();
        cmd.CommandText = "INSERT INTO audit_log(time_ms, principal, action, site_id, details) VALUES ($t, $p, $a, $s, $d) RETURNING seq";
        cmd.Parameters.AddWithValue("$t", now);
        cmd.Parameters.AddWithValue("$p", principal);
        cmd.Parameters.AddWithValue("$a", action.ToString());
        cmd.Parameters.AddWithValue("$s", siteId);
        cmd.Parameters.AddWithValue("$d", details);
        var seq = Convert.ToInt64(cmd.ExecuteScalar(), System.Globalization.CultureInfo.InvariantCulture);
        return new AuditEntry(seq, DateTimeOffset.FromUnixTimeMilliseconds(now), principal, action, siteId, details);
    }

    public IReadOnlyList<AuditEntry> List(string? siteId, IReadOnlyCollection<string>? allowedSites, long beforeSequence, int limit)
    {
        using var db = Open();
        using var cmd = db.CreateCommand();
        var where = new List<string> { "seq < $before" };
        cmd.Parameters.AddWithValue("$before", beforeSequence <= 0 ? long.MaxValue : beforeSequence);
        if (!string.IsNullOrEmpty(siteId))
        {
            where.Add("site_id = $site");
            cmd.Parameters.AddWithValue("$site", siteId);
        }

        if (allowedSites is not null)
        {
            var names = new List<string>();
            var i = 0;
            foreach (var site in allowedSites)
            {
                var name = $"$a{i++}";
                names.Add(name);
                cmd.Parameters.AddWithValue(name, site);
            }

            where.Add(names.Count == 0 ? "0" : $"site_id IN ({string.Join(", ", names)})");
        }

        cmd.CommandText = $"SELECT {AuditEntry.Columns} FROM audit_log WHERE {string.Join(" AND ", where)} ORDER BY seq DESC LIMIT $limit";
        cmd.Parameters.AddWithValue("$limit", limit);
        using var r = cmd.ExecuteReader();
        return AuditEntry.Read(r);
    }

    private SqliteConnection Open()
    {
        var db = new SqliteConnection(_connectionString);
        db.Open();
        return db;
    }
}
