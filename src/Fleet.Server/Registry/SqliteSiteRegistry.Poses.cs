using Fleet.Grains;
using Fleet.Grains.Registry;

namespace Fleet.Server.Registry;

/// <summary>Robots' last poses in the registry file (a table of its own, created on first use).</summary>
public sealed partial class SqliteSiteRegistry : IRobotPoseStore
{
    private int _posesTableReady;

    public void SavePoses(IReadOnlyCollection<StoredRobotPose> poses)
    {
        if (poses.Count == 0)
        {
            return;
        }

        EnsurePosesTable();
        lock (_writeGate)
        {
            using var db = Open();
            using var tx = new WriteTransaction(db);
            using var cmd = Command(db, """
                INSERT INTO robot_poses(site_id, robot_id, t, x, y, z, tag_x, tag_y, tag_z, yaw, position_sigma, yaw_sigma, saved_ms)
                VALUES ($s, $r, $t, $x, $y, $z, $tx, $ty, $tz, $yaw, $ps, $ys, $saved)
                ON CONFLICT(site_id, robot_id) DO UPDATE SET t = $t, x = $x, y = $y, z = $z, tag_x = $tx, tag_y = $ty, tag_z = $tz,
                    yaw = $yaw, position_sigma = $ps, yaw_sigma = $ys, saved_ms = $saved
                """, ("$s", string.Empty), ("$r", string.Empty), ("$t", 0.0), ("$x", 0.0), ("$y", 0.0), ("$z", 0.0), ("$tx", 0.0), ("$ty", 0.0),
                ("$tz", 0.0), ("$yaw", 0.0), ("$ps", 0.0), ("$ys", 0.0), ("$saved", 0L));
            foreach (var p in poses)
            {
                cmd.Parameters["$s"].Value = p.SiteId;
                cmd.Parameters["$r"].Value = p.RobotId;
                cmd.Parameters["$t"].Value = p.Time;
                cmd.Parameters["$x"].Value = p.Position.X;
                cmd.Parameters["$y"].Value = p.Position.Y;
                cmd.Parameters["$z"].Value = p.Position.Z;
                cmd.Parameters["$tx"].Value = p.TagPosition.X;
                cmd.Parameters["$ty"].Value = p.TagPosition.Y;
                cmd.Parameters["$tz"].Value = p.TagPosition.Z;
                cmd.Parameters["$yaw"].Value = p.Yaw;
                // SQLite stores NaN as NULL; the columns allow it and reading maps it back.
                cmd.Parameters["$ps"].Value = double.IsNaN(p.PositionSigma) ? DBNull.Value : p.PositionSigma;
                cmd.Parameters["$ys"].Value = double.IsNaN(p.YawSigma) ? DBNull.Value : p.YawSigma;
                cmd.Parameters["$saved"].Value = p.SavedAt.ToUnixTimeMilliseconds();
                cmd.ExecuteNonQuery();
            }

            tx.Commit();
        }
    }

    public StoredRobotPose? GetPose(string siteId, string robotId)
    {
        EnsurePosesTable();
        using var db = Open();
        using var cmd = Command(db, "SELECT t, x, y, z, tag_x, tag_y, tag_z, yaw, position_sigma, yaw_sigma, saved_ms FROM robot_poses WHERE site_id = $s AND robot_id = $r",
            ("$s", siteId), ("$r", robotId));
        using var r = cmd.ExecuteReader();
        if (!r.Read())
        {
            return null;
        }

        double Nullable(int i) => r.IsDBNull(i) ? double.NaN : r.GetDouble(i);
        return new StoredRobotPose(siteId, robotId, r.GetDouble(0), new Vec3(r.GetDouble(1), r.GetDouble(2), r.GetDouble(3)),
            new Vec3(r.GetDouble(4), r.GetDouble(5), r.GetDouble(6)), r.GetDouble(7), Nullable(8), Nullable(9),
            DateTimeOffset.FromUnixTimeMilliseconds(r.GetInt64(10)));
    }

    private void EnsurePosesTable()
    {
        if (Volatile.Read(ref _posesTableReady) == 1)
        {
            return;
        }

        lock (_writeGate)
        {
            using var db = Open();
            Execute(db, """
                CREATE TABLE IF NOT EXISTS robot_poses(
                    site_id TEXT NOT NULL, robot_id TEXT NOT NULL, t REAL NOT NULL, x REAL NOT NULL, y REAL NOT NULL, z REAL NOT NULL,
                    tag_x REAL NOT NULL, tag_y REAL NOT NULL, tag_z REAL NOT NULL, yaw REAL NOT NULL, position_sigma REAL, yaw_sigma REAL,
                    saved_ms INTEGER NOT NULL, PRIMARY KEY(site_id, robot_id))
                """);
            Volatile.Write(ref _posesTableReady, 1);
        }
    }
}
