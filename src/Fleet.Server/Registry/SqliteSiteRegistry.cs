using System.Globalization;
using System.Security.Cryptography;
using Fleet.Data;
using Fleet.Estimation.Anchors;
using Fleet.Estimation.Filtering;
using Fleet.Estimation.Geometry;
using Fleet.Grains.Registry;
using Microsoft.Data.Sqlite;

namespace Fleet.Server.Registry;

/// <summary>
/// The site registry in one SQLite file (WAL journal, <c>synchronous = FULL</c>: a write that returned is on disk and
/// survives a killed process or a power cut; every multi-statement change is one <c>BEGIN IMMEDIATE</c> transaction,
/// so a crash leaves it wholly done or not at all). Anchor maps are stored as site-file JSON (DESIGN.md), so a
/// stored version can be exported and read by every offline command. Writes are serialised in-process so version numbers are
/// assigned without races; reads use pooled connections. Times are stored as Unix milliseconds (UTC).
/// </summary>
public sealed partial class SqliteSiteRegistry : ISiteRegistry, IDisposable
{
    public const string FileName = "fleet-registry.db";

    private const int SchemaVersion = 1;

    private readonly string _connectionString;
    private readonly TimeProvider _time;
    private readonly Lock _writeGate = new();

    public SqliteSiteRegistry(string dataDirectory, TimeProvider time)
    {
        Directory.CreateDirectory(dataDirectory);
        Path = System.IO.Path.GetFullPath(System.IO.Path.Combine(dataDirectory, FileName));
        _connectionString = new SqliteConnectionStringBuilder { DataSource = Path, Pooling = true, DefaultTimeout = 30 }.ToString();
        _time = time;
        Migrate();
    }

    public string Path { get; }

    public SiteEntry CreateSite(string siteId, string displayName)
    {
        lock (_writeGate)
        {
            using var db = Open();
            if (ReadSite(db, siteId) is not null)
            {
                throw new RegistryException(RegistryError.AlreadyExists, $"site '{siteId}' already exists");
            }

            Execute(db, "INSERT INTO sites(site_id, display_name, created_ms, anchor_map_version, bias_model_version) VALUES ($id, $name, $now, 0, 0)",
                ("$id", siteId), ("$name", displayName), ("$now", Now()));
            return ReadSite(db, siteId)!;
        }
    }

    public SiteEntry? GetSite(string siteId)
    {
        using var db = Open();
        return ReadSite(db, siteId);
    }

    public IReadOnlyList<SiteEntry> ListSites(string? afterSiteId, int limit)
    {
        using var db = Open();
        using var cmd = Command(db, "SELECT site_id, display_name, created_ms, anchor_map_version, bias_model_version FROM sites WHERE site_id > $after ORDER BY site_id LIMIT $limit",
            ("$after", afterSiteId ?? string.Empty), ("$limit", limit));
        using var r = cmd.ExecuteReader();
        var list = new List<SiteEntry>();
        while (r.Read())
        {
            list.Add(ReadSiteRow(r));
        }

        return list;
    }

    public AnchorMapEntry AddAnchorMap(string siteId, IReadOnlyList<Anchor> anchors)
    {
        lock (_writeGate)
        {
            using var db = Open();
            using var tx = new WriteTransaction(db);
            RequireSite(db, siteId);
            var version = NextVersion(db, "anchor_maps", siteId);
            var now = Now();
            Execute(db, "INSERT INTO anchor_maps(site_id, version, created_ms, site_json) VALUES ($id, $v, $now, $json)",
                ("$id", siteId), ("$v", version), ("$now", now), ("$json", SiteFile.ToJson(new SiteLayout(AnchorMap.Create(siteId, anchors), []))));
            Execute(db, "UPDATE sites SET anchor_map_version = $v WHERE site_id = $id", ("$id", siteId), ("$v", version));
            tx.Commit();
            return new AnchorMapEntry(siteId, version, FromMs(now), anchors.ToList());
        }
    }

    public AnchorMapEntry? GetAnchorMap(string siteId, int version)
    {
        using var db = Open();
        if (version <= 0)
        {
            version = ReadSite(db, siteId)?.AnchorMapVersion ?? 0;
            if (version <= 0)
            {
                return null;
            }
        }

        using var cmd = Command(db, "SELECT created_ms, site_json FROM anchor_maps WHERE site_id = $id AND version = $v", ("$id", siteId), ("$v", version));
        using var r = cmd.ExecuteReader();
        return r.Read() ? new AnchorMapEntry(siteId, version, FromMs(r.GetInt64(0)), SiteFile.ParseJson(r.GetString(1), $"registry:{siteId}/v{version}").Anchors.Anchors.ToList()) : null;
    }

    public BiasModelEntry AddBiasModel(string siteId, byte[] model, string description, bool activate)
    {
        lock (_writeGate)
        {
            using var db = Open();
            using var tx = new WriteTransaction(db);
            RequireSite(db, siteId);
            var version = NextVersion(db, "bias_models", siteId);
            Execute(db, "INSERT INTO bias_models(site_id, version, created_ms, description, model, sha256) VALUES ($id, $v, $now, $d, $m, $h)",
                ("$id", siteId), ("$v", version), ("$now", Now()), ("$d", description), ("$m", model),
                ("$h", Convert.ToHexStringLower(SHA256.HashData(model))));
            if (activate)
            {
                Activate(db, siteId, version);
            }

            tx.Commit();
            return ReadBiasModels(db, siteId, version - 1, 1)[0];
        }
    }

    public byte[]? GetBiasModelBytes(string siteId, int version)
    {
        using var db = Open();
        using var cmd = Command(db, "SELECT model FROM bias_models WHERE site_id = $id AND version = $v", ("$id", siteId), ("$v", version));
        return cmd.ExecuteScalar() as byte[];
    }

    public IReadOnlyList<BiasModelEntry> ListBiasModels(string siteId, int afterVersion, int limit)
    {
        using var db = Open();
        return ReadBiasModels(db, siteId, afterVersion, limit);
    }

    public SiteEntry ActivateBiasModel(string siteId, int version)
    {
        lock (_writeGate)
        {
            using var db = Open();
            using var tx = new WriteTransaction(db);
            RequireSite(db, siteId);
            if (version > 0)
            {
                using var cmd = Command(db, "SELECT COUNT(*) FROM bias_models WHERE site_id = $id AND version = $v", ("$id", siteId), ("$v", version));
                if (Convert.ToInt64(cmd.ExecuteScalar(), CultureInfo.InvariantCulture) == 0)
                {
                    throw new RegistryException(RegistryError.NotFound, $"site '{siteId}' has no bias model version {version}");
                }
            }

            Activate(db, siteId, version);
            tx.Commit();
            return ReadSite(db, siteId)!;
        }
    }

    public SiteEntry RollBackBiasModel(string siteId)
    {
        lock (_writeGate)
        {
            using var db = Open();
            using var tx = new WriteTransaction(db);
            RequireSite(db, siteId);
            using var last = Command(db, "SELECT MAX(seq) FROM bias_model_activations WHERE site_id = $id", ("$id", siteId));
            if (last.ExecuteScalar() is not long seq)
            {
                throw new RegistryException(RegistryError.FailedPrecondition, $"site '{siteId}' has no bias model activation to roll back");
            }

            Execute(db, "DELETE FROM bias_model_activations WHERE seq = $seq", ("$seq", seq));
            using var previous = Command(db, "SELECT version FROM bias_model_activations WHERE site_id = $id ORDER BY seq DESC LIMIT 1", ("$id", siteId));
            var version = previous.ExecuteScalar() is long v ? (int)v : 0;
            Execute(db, "UPDATE sites SET bias_model_version = $v WHERE site_id = $id", ("$id", siteId), ("$v", version));
            tx.Commit();
            return ReadSite(db, siteId)!;
        }
    }

    public RobotEntry? GetRobot(string siteId, string robotId)
    {
        using var db = Open();
        return ReadRobot(db, siteId, robotId);
    }

    public RobotEntry PutRobot(string siteId, string robotId, Vector3D tagOffset, MotionModelKind motion)
    {
        lock (_writeGate)
        {
            using var db = Open();
            RequireSite(db, siteId);
            var now = Now();
            Execute(db, """
                INSERT INTO robots(site_id, robot_id, tag_x, tag_y, tag_z, motion, first_seen_ms, last_seen_ms)
                VALUES ($s, $r, $x, $y, $z, $m, $now, $now)
                ON CONFLICT(site_id, robot_id) DO UPDATE SET tag_x = $x, tag_y = $y, tag_z = $z, motion = $m
                """,
                ("$s", siteId), ("$r", robotId), ("$x", tagOffset.X), ("$y", tagOffset.Y), ("$z", tagOffset.Z), ("$m", MotionName(motion)), ("$now", now));
            return ReadRobot(db, siteId, robotId)!;
        }
    }

    public void TouchRobots(IReadOnlyCollection<RobotSighting> sightings, MotionModelKind defaultMotion)
    {
        if (sightings.Count == 0)
        {
            return;
        }

        lock (_writeGate)
        {
            using var db = Open();
            using var tx = new WriteTransaction(db);
            using var cmd = Command(db, """
                INSERT INTO robots(site_id, robot_id, tag_x, tag_y, tag_z, motion, first_seen_ms, last_seen_ms)
                SELECT $s, $r, 0, 0, 0, $m, $t, $t WHERE EXISTS (SELECT 1 FROM sites WHERE site_id = $s)
                ON CONFLICT(site_id, robot_id) DO UPDATE SET last_seen_ms = MAX(last_seen_ms, excluded.last_seen_ms)
                """, ("$s", string.Empty), ("$r", string.Empty), ("$m", MotionName(defaultMotion)), ("$t", 0L));
            foreach (var sighting in sightings)
            {
                cmd.Parameters["$s"].Value = sighting.SiteId;
                cmd.Parameters["$r"].Value = sighting.RobotId;
                cmd.Parameters["$t"].Value = sighting.Seen.ToUnixTimeMilliseconds();
                cmd.ExecuteNonQuery();
            }

            tx.Commit();
        }
    }

    public IReadOnlyList<RobotEntry> ListRobots(string siteId, string? afterRobotId, int limit)
    {
        using var db = Open();
        using var cmd = Command(db, $"{RobotSelect} WHERE site_id = $s AND robot_id > $after ORDER BY robot_id LIMIT $limit",
            ("$s", siteId), ("$after", afterRobotId ?? string.Empty), ("$limit", limit));
        using var r = cmd.ExecuteReader();
        var list = new List<RobotEntry>();
        while (r.Read())
        {
            list.Add(ReadRobotRow(r));
        }

        return list;
    }

    public void Dispose() => SqliteConnection.ClearAllPools();

    /// <summary>BEGIN IMMEDIATE … COMMIT in plain SQL (commands need no enlisting); rolls back unless committed.</summary>
    private sealed class WriteTransaction : IDisposable
    {
        private readonly SqliteConnection _db;
        private bool _done;

        public WriteTransaction(SqliteConnection db)
        {
            _db = db;
            Execute(db, "BEGIN IMMEDIATE");
        }

        public void Commit()
        {
            Execute(_db, "COMMIT");
            _done = true;
        }

        public void Dispose()
        {
            if (!_done)
            {
                Execute(_db, "ROLLBACK");
            }
        }
    }

    private const string RobotSelect = "SELECT site_id, robot_id, tag_x, tag_y, tag_z, motion, first_seen_ms, last_seen_ms FROM robots";

    private void Migrate()
    {
        using var db = Open();
        Execute(db, "PRAGMA journal_mode = WAL");
        Execute(db, """
            CREATE TABLE IF NOT EXISTS schema_info(version INTEGER NOT NULL);
            CREATE TABLE IF NOT EXISTS sites(
                site_id TEXT PRIMARY KEY, display_name TEXT NOT NULL, created_ms INTEGER NOT NULL,
                anchor_map_version INTEGER NOT NULL, bias_model_version INTEGER NOT NULL);
            CREATE TABLE IF NOT EXISTS anchor_maps(
                site_id TEXT NOT NULL REFERENCES sites(site_id), version INTEGER NOT NULL, created_ms INTEGER NOT NULL,
                site_json TEXT NOT NULL, PRIMARY KEY(site_id, version));
            CREATE TABLE IF NOT EXISTS bias_models(
                site_id TEXT NOT NULL REFERENCES sites(site_id), version INTEGER NOT NULL, created_ms INTEGER NOT NULL,
                description TEXT NOT NULL, model BLOB NOT NULL, sha256 TEXT NOT NULL, PRIMARY KEY(site_id, version));
            CREATE TABLE IF NOT EXISTS bias_model_activations(
                seq INTEGER PRIMARY KEY AUTOINCREMENT, site_id TEXT NOT NULL REFERENCES sites(site_id),
                version INTEGER NOT NULL, activated_ms INTEGER NOT NULL);
            CREATE TABLE IF NOT EXISTS robots(
                site_id TEXT NOT NULL REFERENCES sites(site_id), robot_id TEXT NOT NULL,
                tag_x REAL NOT NULL, tag_y REAL NOT NULL, tag_z REAL NOT NULL, motion TEXT NOT NULL,
                first_seen_ms INTEGER NOT NULL, last_seen_ms INTEGER NOT NULL, PRIMARY KEY(site_id, robot_id));
            """);
        using var cmd = Command(db, "SELECT version FROM schema_info");
        var existing = cmd.ExecuteScalar();
        if (existing is null)
        {
            Execute(db, "INSERT INTO schema_info(version) VALUES ($v)", ("$v", SchemaVersion));
        }
        else if (Convert.ToInt32(existing, CultureInfo.InvariantCulture) > SchemaVersion)
        {
            throw new InvalidOperationException($"registry {Path} has schema version {existing}, newer than this server's {SchemaVersion}");
        }
    }

    private void Activate(SqliteConnection db, string siteId, int version)
    {
        Execute(db, "INSERT INTO bias_model_activations(site_id, version, activated_ms) VALUES ($id, $v, $now)", ("$id", siteId), ("$v", version), ("$now", Now()));
        Execute(db, "UPDATE sites SET bias_model_version = $v WHERE site_id = $id", ("$id", siteId), ("$v", version));
    }

    private static List<BiasModelEntry> ReadBiasModels(SqliteConnection db, string siteId, int afterVersion, int limit)
    {
        using var cmd = Command(db, """
            SELECT m.version, m.created_ms, m.description, length(m.model), m.sha256, s.bias_model_version
            FROM bias_models m JOIN sites s ON s.site_id = m.site_id
            WHERE m.site_id = $id AND m.version > $after ORDER BY m.version LIMIT $limit
            """, ("$id", siteId), ("$after", afterVersion), ("$limit", limit));
        using var r = cmd.ExecuteReader();
        var list = new List<BiasModelEntry>();
        while (r.Read())
        {
            var version = r.GetInt32(0);
            list.Add(new BiasModelEntry(siteId, version, FromMs(r.GetInt64(1)), r.GetString(2), r.GetInt64(3), r.GetString(4), r.GetInt32(5) == version));
        }

        return list;
    }

    private static void RequireSite(SqliteConnection db, string siteId)
    {
        if (ReadSite(db, siteId) is null)
        {
            throw new RegistryException(RegistryError.NotFound, $"site '{siteId}' does not exist");
        }
    }

    private static int NextVersion(SqliteConnection db, string table, string siteId)
    {
        using var cmd = Command(db, $"SELECT COALESCE(MAX(version), 0) + 1 FROM {table} WHERE site_id = $id", ("$id", siteId));
        return Convert.ToInt32(cmd.ExecuteScalar(), CultureInfo.InvariantCulture);
    }

    private static SiteEntry? ReadSite(SqliteConnection db, string siteId)
    {
        using var cmd = Command(db, "SELECT site_id, display_name, created_ms, anchor_map_version, bias_model_version FROM sites WHERE site_id = $id", ("$id", siteId));
        using var r = cmd.ExecuteReader();
        return r.Read() ? ReadSiteRow(r) : null;
    }

    private static SiteEntry ReadSiteRow(SqliteDataReader r) =>
        new(r.GetString(0), r.GetString(1), FromMs(r.GetInt64(2)), r.GetInt32(3), r.GetInt32(4));

    private static RobotEntry? ReadRobot(SqliteConnection db, string siteId, string robotId)
    {
        using var cmd = Command(db, $"{RobotSelect} WHERE site_id = $s AND robot_id = $r", ("$s", siteId), ("$r", robotId));
        using var r = cmd.ExecuteReader();
        return r.Read() ? ReadRobotRow(r) : null;
    }

    private static RobotEntry ReadRobotRow(SqliteDataReader r) => new(
        r.GetString(0), r.GetString(1), new Vector3D(r.GetDouble(2), r.GetDouble(3), r.GetDouble(4)),
        Enum.TryParse<MotionModelKind>(r.GetString(5), out var motion) ? motion : MotionModelKind.PlanarOdometry,
        FromMs(r.GetInt64(6)), FromMs(r.GetInt64(7)));

    private static string MotionName(MotionModelKind motion) => motion.ToString();

    private SqliteConnection Open()
    {
        var db = new SqliteConnection(_connectionString);
        db.Open();
        // Per connection (not stored in the file): in WAL mode FULL syncs the log at every commit, so a committed
        // transaction survives power loss, not only a killed process (sqlite.org/pragma.html#pragma_synchronous).
        Execute(db, "PRAGMA synchronous = FULL");
        return db;
    }

    private long Now() => _time.GetUtcNow().ToUnixTimeMilliseconds();

    private static DateTimeOffset FromMs(long ms) => DateTimeOffset.FromUnixTimeMilliseconds(ms);

    private static SqliteCommand Command(SqliteConnection db, string sql, params (string Name, object Value)[] parameters)
    {
        var cmd = db.CreateCommand();
        cmd.CommandText = sql;
        foreach (var (name, value) in parameters)
        {
            cmd.Parameters.AddWithValue(name, value);
        }

        return cmd;
    }

    private static void Execute(SqliteConnection db, string sql, params (string Name, object Value)[] parameters)
    {
        using var cmd = Command(db, sql, parameters);
        cmd.ExecuteNonQuery();
    }
}
