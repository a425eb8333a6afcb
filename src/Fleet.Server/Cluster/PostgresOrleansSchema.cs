using System.Reflection;
using Npgsql;

namespace Fleet.Server.Cluster;

/// <summary>
/// Applies Orleans' PostgreSQL clustering scripts (vendored under Cluster/Sql, see NOTICE.md there) once per database.
/// Runs under a transaction-scoped advisory lock, so silos starting together apply them exactly once.
/// </summary>
public static class PostgresOrleansSchema
{
    private const long LockKey = 0x466C656574_01; // "Fleet" + 1: only this schema step takes it

    private static readonly string[] Scripts =
    [
        "orleans-postgresql-main.sql",
        "orleans-postgresql-clustering.sql",
        "orleans-postgresql-clustering-atomic-writes.sql",
    ];

    /// <summary>True when the tables were created now, false when they were there already.</summary>
    public static bool Apply(string connectionString)
    {
        using var db = new NpgsqlConnection(connectionString);
        db.Open();
        using var tx = db.BeginTransaction();
        Execute(db, tx, $"SELECT pg_advisory_xact_lock({LockKey})");
        using (var check = new NpgsqlCommand("SELECT to_regclass('orleansmembershiptable') IS NOT NULL", db, tx))
        {
            if (check.ExecuteScalar() is true)
            {
                tx.Commit();
                return false;
            }
        }

        foreach (var script in Scripts)
        {
            Execute(db, tx, Read(script));
        }

        tx.Commit();
        return true;
    }

    private static string Read(string name)
    {
        var assembly = typeof(PostgresOrleansSchema).Assembly;
        using var stream = assembly.GetManifestResourceStream($"Fleet.Server.Cluster.Sql.{name}")
            ?? throw new InvalidOperationException($"embedded script {name} is missing from {assembly.GetName().Name}");
        using var reader = new StreamReader(stream);
        return reader.ReadToEnd();
    }

    private static void Execute(NpgsqlConnection db, NpgsqlTransaction tx, string sql)
    {
        using var cmd = new NpgsqlCommand(sql, db, tx);
        cmd.ExecuteNonQuery();
    }
}
