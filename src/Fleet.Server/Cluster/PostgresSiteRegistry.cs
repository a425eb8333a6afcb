using System.Security.Cryptography;
using Fleet.Data;
using Fleet.Estimation.Anchors;
using Fleet.Estimation.Filtering;
using Fleet.Estimation.Geometry;
using Fleet.Grains;
using Fleet.Grains.Registry;
using Fleet.Server.Registry;
using Npgsql;
using NpgsqlTypes;

namespace Fleet.Server.Cluster;

/// <summary>
/// The site registry on PostgreSQL, shared by every silo of a cluster, with the audit log beside it (so every silo lists
/// every silo's admin changes). Same contract and layout as the SQLite registry
/// (anchor maps as site-file JSON, models as bytes, times as Unix milliseconds). Version numbers are assigned under a
/// row lock on the site (<c>SELECT … FOR UPDATE</c>), so silos writing at once never hand out one version twice.
/// </summary>
public sealed partial class PostgresSiteRegistry : ISiteRegistry, IRobotPoseStore, IAuditLog, IDisposable
{
    private const int SchemaVersion = 1;
    private const long MigrationLockKey = 0x466C656574_02;

    private readonly NpgsqlDataSource _db;
    private readonly TimeProvider _time;

    public PostgresSiteRegistry(string connectionString, TimeProvider time)
    {
        _db = NpgsqlDataSource.Create(connectionString);
        _time = time;
        Migrate();
    }

    public SiteEntry CreateSite(string siteId, string displayName)
    {
        using var db = _db.OpenConnection();
        using var cmd = Command(db, null, """
            INSERT INTO fleet_sites(site_id, display_name, created_ms, anchor_map_version, bias_model_version)
            VALUES (@id, @name, @now, 0, 0) ON CONFLICT (site_id) DO NOTHING
            """, ("id", siteId), ("name", displayName), ("now", Now()));
        if (cmd.ExecuteNonQuery() == 0)
        {
            throw new RegistryException(RegistryError.AlreadyExists, $"site '{siteId}' already exists");
        }

        return ReadSite(db, null, siteId)!;
    }

    public SiteEntry? GetSite(string siteId)
    {
        using var db = _db.OpenConnection();
        return ReadSite(db, null, siteId);
    }

    public IReadOnlyList<SiteEntry> ListSites(string? afterSiteId, int limit)
    {
        using var db = _db.OpenConnection();
        using var cmd = Command(db, null, $"{SiteSelect} WHERE site_id COLLATE \"C\" > @after ORDER BY site_id COLLATE \"C\" LIMIT @limit",
            ("after", afterSiteId ?? string.Empty), ("limit", limit));
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
        var json = SiteFile.ToJson(new SiteLayout(AnchorMap.Create(siteId, anchors), []));
        using var db = _db.OpenConnection();
        using var tx = db.BeginTransaction();
        LockSite(db, tx, siteId);
        var version = NextVersion(db, tx, "fleet_anchor_maps", siteId);
        var now = Now();
        Execute(db, tx, "INSERT INTO fleet_anchor_maps(site_id, version, created_ms, site_json) VALUES (@id, @v, @now, @json)",
            ("id", siteId), ("v", version), ("now", now), ("json", json));
        Execute(db, tx, "UPDATE fleet_sites SET anchor_map_version = @v WHERE site_id = @id", ("id", siteId), ("v", version));
        tx.Commit();
        return new AnchorMapEntry(siteId, version, FromMs(now), anchors.ToList());
    }

    public AnchorMapEntry? GetAnchorMap(string siteId, int version)
    {
        using var db = _db.OpenConnection();
        if (version <= 0)
        {
            version = ReadSite(db, null, siteId)?.AnchorMapVersion ?? 0;
            if (version <= 0)
            {
                return null;
            }
        }

        using var cmd = Command(db, null, "SELECT created_ms, site_json FROM fleet_anchor_maps WHERE site_id = @id AND version = @v", ("id", siteId), ("v", version));
        using var r = cmd.ExecuteReader();
        return r.Read()
            ? new AnchorMapEntry(siteId, version, FromMs(r.GetInt64(0)), SiteFile.ParseJson(r.GetString(1), $"registry:{siteId}/v{version}").Anchors.Anchors.ToList())
            : null;
    }

    public BiasModelEntry AddBiasModel(string siteId, byte[] model, string description, bool activate)
    {
        using var db = _db.OpenConnection();
        using var tx = db.BeginTransaction();
        LockSite(db, tx, siteId);
        var version = NextVersion(db, tx, "fleet_bias_models", siteId);
        Execute(db, tx, "INSERT INTO fleet_bias_models(site_id, version, created_ms, description, model, sha256) VALUES (@id, @v, @now, @d, @m, @h)",
            ("id", siteId), ("v", version), ("now", Now()), ("d", description), ("m", model), ("h", Convert.ToHexStringLower(SHA256.HashData(model))));
        if (activate)
        {
            Activate(db, tx, siteId, version);
        }

        var entry = ReadBiasModels(db, tx, siteId, version - 1, 1)[0];
        tx.Commit();
        return entry;
    }

    public byte[]? GetBiasModelBytes(string siteId, int version)
    {
        using var db = _db.OpenConnection();
        using var cmd = Command(db, null, "SELECT model FROM fleet_bias_models WHERE site_id = @id AND version = @v", ("id", siteId), ("v", version));
        return cmd.ExecuteScalar() as byte[];
    }

    public IReadOnlyList<BiasModelEntry> ListBiasModels(string siteId, int afterVersion, int limit)
    {
        using var db = _db.OpenConnection();
        return ReadBiasModels(db, null, siteId, afterVersion, limit);
    }

    public SiteEntry ActivateBiasModel(string siteId, int version)
    {
        using var db = _db.OpenConnection();
        using var tx = db.BeginTransaction();
        LockSite(db, tx, siteId);
        if (version > 0)
        {
            using var cmd = Command(db, tx, "SELECT COUNT(*) FROM fleet_bias_models WHERE site_id = @id AND version = @v", ("id", siteId), ("v", version));
            if (Convert.ToInt64(cmd.ExecuteScalar(), System.Globalization.CultureInfo.InvariantCulture) == 0)
            {
                throw new RegistryException(RegistryError.NotFound, $"site '{siteId}' has no bias model version {version}");
            }
        }

        Activate(db, tx, siteId, version);
        var site = ReadSite(db, tx, siteId)!;
        tx.Commit();
        return site;
    }

    public SiteEntry RollBackBiasModel(string siteId)
    {
        using var db = _db.OpenConnection();
        using var tx = db.BeginTransaction();
        LockSite(db, tx, siteId);
        using var last = Command(db, tx, "SELECT MAX(seq) FROM fleet_bias_model_activations WHERE site_id = @id", ("id", siteId));
        if (last.ExecuteScalar() is not long seq)
        {
            throw new RegistryException(RegistryError.FailedPrecondition, $"site '{siteId}' has no bias model activation to roll back");
        }

        Execute(db, tx, "DELETE FROM fleet_bias_model_activations WHERE seq = @seq", ("seq", seq));
        using var previous = Command(db, tx, "SELECT version FROM fleet_bias_model_activations WHERE site_id = @id ORDER BY seq DESC LIMIT 1", ("id", siteId));
        var version = previous.ExecuteScalar() is int v ? v : 0;
        Execute(db, tx, "UPDATE fleet_sites SET bias_model_version = @v WHERE site_id = @id", ("id", siteId), ("v", version));
        var site = ReadSite(db, tx, siteId)!;
        tx.Commit();
        return site;
    }

    public RobotEntry? GetRobot(string siteId, string robotId)
    {
        using var db = _db.OpenConnection();
        return ReadRobot(db, siteId, robotId);
    }

    public RobotEntry PutRobot(string siteId, string robotId, Vector3D tagOffset, MotionModelKind motion)
    {
        using var db = _db.OpenConnection();
        RequireSite(db, null, siteId);
        Execute(db, null, """
            INSERT INTO fleet_robots(site_id, robot_id, tag_x, tag_y, tag_z, motion, first_seen_ms, last_seen_ms)
            VALUES (@s, @r, @x, @y, @z, @m, @now, @now)
            ON CONFLICT (site_id, robot_id) DO UPDATE SET tag_x = @x, tag_y = @y, tag_z = @z, motion = @m
            """, ("s", siteId), ("r", robotId), ("x", tagOffset.X), ("y", tagOffset.Y), ("z", tagOffset.Z), ("m", motion.ToString()), ("now", Now()));
        return ReadRobot(db, siteId, robotId)!;
    }

    public void TouchRobots(IReadOnlyCollection<RobotSighting> sightings, MotionModelKind defaultMotion)
    {
        if (sightings.Count == 0)
        {
            return;
        }

        using var db = _db.OpenConnection();
        using var tx = db.BeginTransaction();
        using var batch = new NpgsqlBatch(db, tx);
        foreach (var sighting in sightings)
        {
            var cmd = new NpgsqlBatchCommand("""
                INSERT INTO fleet_robots(site_id, robot_id, tag_x, tag_y, tag_z, motion, first_seen_ms, last_seen_ms)
                SELECT $1, $2, 0, 0, 0, $3, $4, $4 WHERE EXISTS (SELECT 1 FROM fleet_sites WHERE site_id = $1)
                ON CONFLICT (site_id, robot_id) DO UPDATE SET last_seen_ms = GREATEST(fleet_robots.last_seen_ms, excluded.last_seen_ms)
                """);
            cmd.Parameters.Add(new NpgsqlParameter { Value = sighting.SiteId });
            cmd.Parameters.Add(new NpgsqlParameter { Value = sighting.RobotId });
            cmd.Parameters.Add(new NpgsqlParameter { Value = defaultMotion.ToString() });
            cmd.Parameters.Add(new NpgsqlParameter { Value = sighting.Seen.ToUnixTimeMilliseconds() });
            batch.BatchCommands.Add(cmd);
        }

        batch.ExecuteNonQuery();
        tx.Commit();
    }

    public IReadOnlyList<RobotEntry> ListRobots(string siteId, string? afterRobotId, int limit)
    {
        using var db = _db.OpenConnection();
        using var cmd = Command(db, null, $"{RobotSelect} WHERE site_id = @s AND robot_id COLLATE \"C\" > @after ORDER BY robot_id COLLATE \"C\" LIMIT @limit",
            ("s", siteId), ("after", afterRobotId ?? string.Empty), ("limit", limit));
        using var r = cmd.ExecuteReader();
        var list = new List<RobotEntry>();
        while (r.Read())
        {
            list.Add(ReadRobotRow(r));
        }

        return list;
    }

    public void SavePoses(IReadOnlyCollection<StoredRobotPose> poses)
    {
        if (poses.Count == 0)
        {
            return;
        }

        using var db = _db.OpenConnection();
        using var tx = db.BeginTransaction();
        using var batch = new NpgsqlBatch(db, tx);
        foreach (var p in poses)
        {
            var cmd = new NpgsqlBatchCommand("""
                INSERT INTO fleet_robot_poses(site_id, robot_id, t, x, y, z, tag_x, tag_y, tag_z, yaw, position_sigma, yaw_sigma, saved_ms)
                VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13)
                ON CONFLICT (site_id, robot_id) DO UPDATE SET t = excluded.t, x = excluded.x, y = excluded.y, z = excluded.z,
                    tag_x = excluded.tag_x, tag_y = excluded.tag_y, tag_z = excluded.tag_z, yaw = excluded.yaw,
                    position_sigma = excluded.position_sigma, yaw_sigma = excluded.yaw_sigma, saved_ms = excluded.saved_ms
                """);
            foreach (var value in new object[] { p.SiteId, p.RobotId, p.Time, p.Position.X, p.Position.Y, p.Position.Z, p.TagPosition.X, p.TagPosition.Y, p.TagPosition.Z, p.Yaw, p.PositionSigma, p.YawSigma, p.SavedAt.ToUnixTimeMilliseconds() })
            {
                cmd.Parameters.Add(new NpgsqlParameter { Value = value });
            }

            batch.BatchCommands.Add(cmd);
        }

        batch.ExecuteNonQuery();
        tx.Commit();
    }

    public StoredRobotPose? GetPose(string siteId, string robotId)
    {
        using var db = _db.OpenConnection();
        using var cmd = Command(db, null, """
            SELECT t, x, y, z, tag_x, tag_y, tag_z, yaw, position_sigma, yaw_sigma, saved_ms FROM fleet_robot_poses
            WHERE site_id = @s AND robot_id = @r
            """, ("s", siteId), ("r", robotId));
        using var r = cmd.ExecuteReader();
        return r.Read()
            ? new StoredRobotPose(siteId, robotId, r.GetDouble(0), new Vec3(r.GetDouble(1), r.GetDouble(2), r.GetDouble(3)),
                new Vec3(r.GetDouble(4), r.GetDouble(5), r.GetDouble(6)), r.GetDouble(7), r.GetDouble(8), r.GetDouble(9), FromMs(r.GetInt64(10)))
            : null;
    }

    public void Dispose() => _db.Dispose();

    private const string SiteSelect = "SELECT site_id, display_name, created_ms, anchor_map_version, bias_model_version FROM fleet_sites";
    private const string RobotSelect = "SELECT site_id, robot_id, tag_x, tag_y, tag_z, motion, first_seen_ms, last_seen_ms FROM fleet_robots";

    private void Migrate()
    {
        using var db = _db.OpenConnection();
        using var tx = db.BeginTransaction();
        Execute(db, tx, $"SELECT pg_advisory_xact_lock({MigrationLockKey})");
        Execute(db, tx, """
            CREATE TABLE IF NOT EXISTS fleet_schema_info(version integer NOT NULL);
            CREATE TABLE IF NOT EXISTS fleet_sites(
                site_id text PRIMARY KEY, display_name text NOT NULL, created_ms bigint NOT NULL,
                anchor_map_version integer NOT NULL, bias_model_version integer NOT NULL);
            CREATE TABLE IF NOT EXISTS fleet_anchor_maps(
                site_id text NOT NULL REFERENCES fleet_sites(site_id), version integer NOT NULL, created_ms bigint NOT NULL,
                site_json text NOT NULL, PRIMARY KEY(site_id, version));
            CREATE TABLE IF NOT EXISTS fleet_bias_models(
                site_id text NOT NULL REFERENCES fleet_sites(site_id), version integer NOT NULL, created_ms bigint NOT NULL,
                description text NOT NULL, model bytea NOT NULL, sha256 text NOT NULL, PRIMARY KEY(site_id, version));
            CREATE TABLE IF NOT EXISTS fleet_bias_model_activations(
                seq bigserial PRIMARY KEY, site_id text NOT NULL REFERENCES fleet_sites(site_id),
                version integer NOT NULL, activated_ms bigint NOT NULL);
            CREATE TABLE IF NOT EXISTS fleet_robots(
                site_id text NOT NULL REFERENCES fleet_sites(site_id), robot_id text NOT NULL,
                tag_x double precision NOT NULL, tag_y double precision NOT NULL, tag_z double precision NOT NULL, motion text NOT NULL,
                first_seen_ms bigint NOT NULL, last_seen_ms bigint NOT NULL, PRIMARY KEY(site_id, robot_id));
            CREATE TABLE IF NOT EXISTS fleet_robot_poses(
                site_id text NOT NULL, robot_id text NOT NULL, t double precision NOT NULL,
                x double precision NOT NULL, y double precision NOT NULL, z double precision NOT NULL,
                tag_x double precision NOT NULL, tag_y double precision NOT NULL, tag_z double precision NOT NULL,
                yaw double precision NOT NULL, position_sigma double precision NOT NULL, yaw_sigma double precision NOT NULL,
                saved_ms bigint NOT NULL, PRIMARY KEY(site_id, robot_id));
            CREATE TABLE IF NOT EXISTS fleet_audit_log(
                seq bigserial PRIMARY KEY, time_ms bigint NOT NULL, principal text NOT NULL,
                action text NOT NULL, site_id text NOT NULL, details text NOT NULL);
            CREATE INDEX IF NOT EXISTS fleet_audit_log_site ON fleet_audit_log(site_id, seq);
            """);
        using (var cmd = Command(db, tx, "SELECT version FROM fleet_schema_info"))
        {
            var existing = cmd.ExecuteScalar();
            if (existing is null)
            {
                Execute(db, tx, "INSERT INTO fleet_schema_info(version) VALUES (@v)", ("v", SchemaVersion));
            }
            else if ((int)existing > SchemaVersion)
            {
                throw new InvalidOperationException($"the PostgreSQL registry has schema version {existing}, newer than this server's {SchemaVersion}");
            }
        }

        tx.Commit();
    }

    private void Activate(NpgsqlConnection db, NpgsqlTransaction tx, string siteId, int version)
    {
        Execute(db, tx, "INSERT INTO fleet_bias_model_activations(site_id, version, activated_ms) VALUES (@id, @v, @now)", ("id", siteId), ("v", version), ("now", Now()));
        Execute(db, tx, "UPDATE fleet_sites SET bias_model_version = @v WHERE site_id = @id", ("id", siteId), ("v", version));
    }

    private static List<BiasModelEntry> ReadBiasModels(NpgsqlConnection db, NpgsqlTransaction? tx, string siteId, int afterVersion, int limit)
    {
        using var cmd = Command(db, tx, """
            SELECT m.version, m.created_ms, m.description, octet_length(m.model), m.sha256, s.bias_model_version
            FROM fleet_bias_models m JOIN fleet_sites s ON s.site_id = m.site_id
            WHERE m.site_id = @id AND m.version > @after ORDER BY m.version LIMIT @limit
            """, ("id", siteId), ("after", afterVersion), ("limit", limit));
        using var r = cmd.ExecuteReader();
        var list = new List<BiasModelEntry>();
        while (r.Read())
        {
            var version = r.GetInt32(0);
            list.Add(new BiasModelEntry(siteId, version, FromMs(r.GetInt64(1)), r.GetString(2), r.GetInt32(3), r.GetString(4), r.GetInt32(5) == version));
        }

        return list;
    }

    /// <summary>Takes the site's row lock for the rest of the transaction; NotFound when there is no such site.</summary>
    private static void LockSite(NpgsqlConnection db, NpgsqlTransaction tx, string siteId)
    {
        using var cmd = Command(db, tx, "SELECT 1 FROM fleet_sites WHERE site_id = @id FOR UPDATE", ("id", siteId));
        if (cmd.ExecuteScalar() is null)
        {
            throw new RegistryException(RegistryError.NotFound, $"site '{siteId}' does not exist");
        }
    }

    private static void RequireSite(NpgsqlConnection db, NpgsqlTransaction? tx, string siteId)
    {
        if (ReadSite(db, tx, siteId) is null)
        {
            throw new RegistryException(RegistryError.NotFound, $"site '{siteId}' does not exist");
        }
    }

    private static int NextVersion(NpgsqlConnection db, NpgsqlTransaction tx, string table, string siteId)
    {
        using var cmd = Command(db, tx, $"SELECT COALESCE(MAX(version), 0) + 1 FROM {table} WHERE site_id = @id", ("id", siteId));
        return Convert.ToInt32(cmd.ExecuteScalar(), System.Globalization.CultureInfo.InvariantCulture);
    }

    private static SiteEntry? ReadSite(NpgsqlConnection db, NpgsqlTransaction? tx, string siteId)
    {
        using var cmd = Command(db, tx, $"{SiteSelect} WHERE site_id = @id", ("id", siteId));
        using var r = cmd.ExecuteReader();
        return r.Read() ? ReadSiteRow(r) : null;
    }

    private static SiteEntry ReadSiteRow(NpgsqlDataReader r) =>
        new(r.GetString(0), r.GetString(1), FromMs(r.GetInt64(2)), r.GetInt32(3), r.GetInt32(4));

    private static RobotEntry? ReadRobot(NpgsqlConnection db, string siteId, string robotId)
    {
        using var cmd = Command(db, null, $"{RobotSelect} WHERE site_id = @s AND robot_id = @r", ("s", siteId), ("r", robotId));
        using var r = cmd.ExecuteReader();
        return r.Read() ? ReadRobotRow(r) : null;
    }

    private static RobotEntry ReadRobotRow(NpgsqlDataReader r) => new(
        r.GetString(0), r.GetString(1), new Vector3D(r.GetDouble(2), r.GetDouble(3), r.GetDouble(4)),
        Enum.TryParse<MotionModelKind>(r.GetString(5), out var motion) ? motion : MotionModelKind.PlanarOdometry,
        FromMs(r.GetInt64(6)), FromMs(r.GetInt64(7)));

    private long Now() => _time.GetUtcNow().ToUnixTimeMilliseconds();

    private static DateTimeOffset FromMs(long ms) => DateTimeOffset.FromUnixTimeMilliseconds(ms);

    private static NpgsqlCommand Command(NpgsqlConnection db, NpgsqlTransaction? tx, string sql, params (string Name, object Value)[] parameters)
    {
        var cmd = new NpgsqlCommand(sql, db, tx);
        foreach (var (name, value) in parameters)
        {
            cmd.Parameters.Add(value is byte[] bytes
                ? new NpgsqlParameter(name, NpgsqlDbType.Bytea) { Value = bytes }
                : new NpgsqlParameter(name, value));
        }

        return cmd;
    }

    private static void Execute(NpgsqlConnection db, NpgsqlTransaction? tx, string sql, params (string Name, object Value)[] parameters)
    {
        using var cmd = Command(db, tx, sql, parameters);
        cmd.ExecuteNonQuery();
    }
}
