using System.Globalization;
using Npgsql;

namespace Scorer.Store.Postgres;

/// <summary>The retention: daily partitions of predictions and outcomes made ahead and dropped whole (migration 0007).</summary>
public sealed partial class PostgresScorerStore
{
    /// <summary>Days after today (of the pass's clock, UTC) for which partitions are made ahead, besides today's.</summary>
    public const int PartitionDaysAhead = 3;

    /// <summary>How long a pass waits for the lock that creating or dropping a partition takes before it leaves it to the next pass.</summary>
    internal static readonly TimeSpan PartitionLockTimeout = TimeSpan.FromSeconds(5);

    private static readonly string[] PartitionedTables = ["predictions", "outcomes"];

    /// <summary>
    /// One pass of the partitions' upkeep and the retention as of <paramref name="now"/>: (1) rows that went to a
    /// default partition get a partition of their day; (2) partitions are made for today and the next
    /// <see cref="PartitionDaysAhead"/> days; then, with a <see cref="PostgresStoreOptions.PredictionRetention"/>,
    /// (3) prediction partitions are dropped whole, and with an <see cref="PostgresStoreOptions.OutcomeRetention"/>,
    /// (4) outcome partitions, then (5) old outcome conflicts are deleted. Never a row-by-row delete of predictions or
    /// outcomes.
    /// </summary>
    /// <remarks>
    /// <para>
    /// The rule for a prediction partition (one UTC day): dropped when the whole day is older than the retention
    /// (its end at or before <c>now − PredictionRetention</c>) and no prediction in it awaits its outcome. A
    /// prediction awaits its outcome when it has none recorded (reported, or an implicit 0, which the sweep records
    /// once its model's horizon has passed) and its model still has a live or shadow version. So a partition stays
    /// while any of its predictions is within its model's horizon (in effect: until the day is past the retention and
    /// past the longest horizon of the models that served that day), and its predictions awaiting an outcome are
    /// counted in <see cref="PruneResult.KeptAwaitingOutcome"/> at each pass. A prediction is thus kept up to a day
    /// longer than the retention.
    /// </para>
    /// <para>
    /// The rule for an outcome partition: dropped when the day is older than the outcome retention and that day's
    /// prediction partition is gone, so an outcome never goes before its prediction (which would then seem to await
    /// it). Outcome conflicts (one row per disagreeing report, few) are deleted by the report's time, with a DELETE.
    /// </para>
    /// <para>
    /// Each partition is checked and dropped in a transaction of its own that first locks it against writes (what it
    /// counts is then what it drops). Creating or attaching a partition and dropping one take locks on the parent
    /// table for a moment; a pass waits at most <see cref="PartitionLockTimeout"/> for them (a long query may hold
    /// them) and leaves that partition to the next pass. Passes must not run side by side (the host runs them under
    /// the retention lease); the rows counted as deleted are the rows of the partitions dropped.
    /// </para>
    /// </remarks>
    public async Task<PruneResult> PruneAsync(DateTimeOffset now, CancellationToken cancellationToken = default)
    {
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        var created = 0;

        // (1) and (2): every day that has rows in a default partition, and today and the days ahead.
        var today = Day(now);
        var days = new SortedSet<DateTime>(Enumerable.Range(0, PartitionDaysAhead + 1).Select(d => today.AddDays(d)));
        foreach (var table in PartitionedTables)
        {
            await using var command = Command(connection, null, $"SELECT DISTINCT date_trunc('day', scored_at, 'UTC') FROM {table}_default");
            await using var reader = await command.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
            while (await reader.ReadAsync(cancellationToken).ConfigureAwait(false))
            {
                days.Add(DateTime.SpecifyKind(reader.GetDateTime(0), DateTimeKind.Utc));
            }
        }

        foreach (var table in PartitionedTables)
        {
            var existing = await PartitionDaysAsync(connection, table, cancellationToken).ConfigureAwait(false);
            foreach (var day in days.Where(d => !existing.Contains(d)))
            {
                if (await TryCreatePartitionAsync(connection, table, day, cancellationToken).ConfigureAwait(false))
                {
                    created++;
                }
            }
        }

        if (Options.PredictionRetention is not { } retention)
        {
            return PruneResult.None with { PartitionsCreated = created };
        }

        // (3) Prediction partitions whose day has left the retention, each checked and dropped in one transaction.
        long deleted = 0, kept = 0;
        var dropped = 0;
        var cutoff = StoreTime.SafeSubtract(now, retention).UtcDateTime;
        foreach (var day in await PartitionDaysAsync(connection, "predictions", cancellationToken).ConfigureAwait(false))
        {
            if (day.AddDays(1) > cutoff)
            {
                continue;
            }

            var name = PartitionName("predictions", day);
            await using var transaction = await connection.BeginTransactionAsync(cancellationToken).ConfigureAwait(false);
            if (!await TryLockAsync(connection, transaction, name, "EXCLUSIVE", cancellationToken).ConfigureAwait(false))
            {
                continue;
            }

            long rows, awaiting;
            await using (var count = Command(connection, transaction,
                "SELECT count(*), count(*) FILTER (WHERE o.prediction_id IS NULL AND p.model IN (SELECT model FROM model_versions WHERE stage <> 'retired')) "
                + $"FROM {name} p LEFT JOIN outcomes o ON o.prediction_id = p.id AND o.scored_at = p.scored_at AND o.scored_at >= $1 AND o.scored_at < $2"))
            {
                count.Parameters.Add(new NpgsqlParameter<DateTime> { TypedValue = day, NpgsqlDbType = NpgsqlTypes.NpgsqlDbType.TimestampTz });
                count.Parameters.Add(new NpgsqlParameter<DateTime> { TypedValue = day.AddDays(1), NpgsqlDbType = NpgsqlTypes.NpgsqlDbType.TimestampTz });
                await using var reader = await count.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
                await reader.ReadAsync(cancellationToken).ConfigureAwait(false);
                (rows, awaiting) = (reader.GetInt64(0), reader.GetInt64(1));
            }

            if (awaiting > 0)
            {
                kept += awaiting;
                await transaction.RollbackAsync(cancellationToken).ConfigureAwait(false);
                continue;
            }

            if (!await TryLockAsync(connection, transaction, "predictions", "ACCESS EXCLUSIVE", cancellationToken).ConfigureAwait(false))
            {
                continue;
            }

            await ExecuteAsync(connection, transaction, $"DROP TABLE {name}", cancellationToken).ConfigureAwait(false);
            await using (var times = Command(connection, transaction, "DELETE FROM prediction_times WHERE scored_at >= $1 AND scored_at < $2"))
            {
                times.Parameters.Add(new NpgsqlParameter<DateTime> { TypedValue = day, NpgsqlDbType = NpgsqlTypes.NpgsqlDbType.TimestampTz });
                times.Parameters.Add(new NpgsqlParameter<DateTime> { TypedValue = day.AddDays(1), NpgsqlDbType = NpgsqlTypes.NpgsqlDbType.TimestampTz });
                await times.ExecuteNonQueryAsync(cancellationToken).ConfigureAwait(false);
            }

            await transaction.CommitAsync(cancellationToken).ConfigureAwait(false);
            deleted += rows;
            dropped++;
        }

        // (4) Outcome partitions whose day has left the outcome retention and whose predictions are gone; (5) conflicts.
        long outcomesDeleted = 0, conflictsDeleted = 0;
        if (Options.OutcomeRetention is { } outcomeRetention)
        {
            var outcomeCutoff = StoreTime.SafeSubtract(now, outcomeRetention).UtcDateTime;
            var predictionDays = await PartitionDaysAsync(connection, "predictions", cancellationToken).ConfigureAwait(false);
            foreach (var day in await PartitionDaysAsync(connection, "outcomes", cancellationToken).ConfigureAwait(false))
            {
                if (day.AddDays(1) > outcomeCutoff || predictionDays.Contains(day))
                {
                    continue;
                }

                var name = PartitionName("outcomes", day);
                await using var transaction = await connection.BeginTransactionAsync(cancellationToken).ConfigureAwait(false);
                if (!await TryLockAsync(connection, transaction, "outcomes", "ACCESS EXCLUSIVE", cancellationToken).ConfigureAwait(false))
                {
                    continue;
                }

                await using (var count = Command(connection, transaction, $"SELECT count(*) FROM {name}"))
                {
                    outcomesDeleted += Convert.ToInt64(await count.ExecuteScalarAsync(cancellationToken).ConfigureAwait(false), CultureInfo.InvariantCulture);
                }

                await ExecuteAsync(connection, transaction, $"DROP TABLE {name}", cancellationToken).ConfigureAwait(false);
                await transaction.CommitAsync(cancellationToken).ConfigureAwait(false);
                dropped++;
            }

            await using var conflicts = Command(connection, null, "DELETE FROM outcome_conflicts WHERE at < $1");
            conflicts.Parameters.Add(Timestamp(StoreTime.SafeSubtract(now, outcomeRetention)));
            conflictsDeleted = await conflicts.ExecuteNonQueryAsync(cancellationToken).ConfigureAwait(false);
        }

        return new PruneResult(deleted, kept, outcomesDeleted, conflictsDeleted) { PartitionsDropped = dropped, PartitionsCreated = created };
    }

    /// <summary>
    /// Makes the partition of <paramref name="table"/> for <paramref name="day"/> in one transaction: a table like the
    /// parent, the day's rows moved into it from the default partition (none, unless rows came before their
    /// partition), attached. Writes to the default partition wait for it; writes to other partitions do not. False
    /// when a lock could not be had in time (the next pass tries again) or another pass made it first.
    /// </summary>
    private async Task<bool> TryCreatePartitionAsync(NpgsqlConnection connection, string table, DateTime day, CancellationToken cancellationToken)
    {
        var name = PartitionName(table, day);
        await using var transaction = await connection.BeginTransactionAsync(cancellationToken).ConfigureAwait(false);
        if (!await TryLockAsync(connection, transaction, $"{table}_default", "EXCLUSIVE", cancellationToken).ConfigureAwait(false))
        {
            return false;
        }

        if ((await PartitionDaysAsync(connection, table, cancellationToken, transaction).ConfigureAwait(false)).Contains(day))
        {
            return false;
        }

        var from = Literal(day);
        var to = Literal(day.AddDays(1));
        await ExecuteAsync(connection, transaction,
            $"CREATE TABLE {name} (LIKE {table} INCLUDING DEFAULTS INCLUDING CONSTRAINTS); "
            + $"ALTER TABLE {name} ADD CONSTRAINT {name}_day CHECK (scored_at >= {from} AND scored_at < {to}); "
            + $"WITH moved AS (DELETE FROM {table}_default WHERE scored_at >= {from} AND scored_at < {to} RETURNING *) INSERT INTO {name} SELECT * FROM moved; "
            + $"ALTER TABLE {table} ATTACH PARTITION {name} FOR VALUES FROM ({from}) TO ({to}); "
            + $"ALTER TABLE {name} DROP CONSTRAINT {name}_day",
            cancellationToken).ConfigureAwait(false);
        await transaction.CommitAsync(cancellationToken).ConfigureAwait(false);
        return true;
    }

    /// <summary>
    /// Takes a table lock within the transaction, waiting at most <see cref="PartitionLockTimeout"/>; false (and the
    /// transaction rolled back) when it could not, or when the wait met a deadlock (a write into the very partition).
    /// </summary>
    private static async Task<bool> TryLockAsync(NpgsqlConnection connection, NpgsqlTransaction transaction, string table, string mode, CancellationToken cancellationToken)
    {
        try
        {
            await ExecuteAsync(connection, transaction,
                string.Create(CultureInfo.InvariantCulture, $"SET LOCAL lock_timeout = {(long)PartitionLockTimeout.TotalMilliseconds}; LOCK TABLE {table} IN {mode} MODE"),
                cancellationToken).ConfigureAwait(false);
            return true;
        }
        catch (PostgresException ex) when (ex.SqlState is PostgresErrorCodes.LockNotAvailable or PostgresErrorCodes.DeadlockDetected)
        {
            await transaction.RollbackAsync(CancellationToken.None).ConfigureAwait(false);
            return false;
        }
    }

    /// <summary>The days of <paramref name="table"/>'s partitions (the default left out), from the catalog (pg_inherits), oldest first.</summary>
    internal static async Task<SortedSet<DateTime>> PartitionDaysAsync(NpgsqlConnection connection, string table, CancellationToken cancellationToken,
        NpgsqlTransaction? transaction = null)
    {
        var days = new SortedSet<DateTime>();
        await using var command = Command(connection, transaction,
            "SELECT c.relname FROM pg_inherits i JOIN pg_class c ON c.oid = i.inhrelid WHERE i.inhparent = $1::regclass");
        command.Parameters.Add(Text(table));
        await using var reader = await command.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
        while (await reader.ReadAsync(cancellationToken).ConfigureAwait(false))
        {
            var name = reader.GetString(0);
            if (DateTime.TryParseExact(name.AsSpan(table.Length + 1), "yyyyMMdd", CultureInfo.InvariantCulture,
                DateTimeStyles.AdjustToUniversal | DateTimeStyles.AssumeUniversal, out var day))
            {
                days.Add(DateTime.SpecifyKind(day, DateTimeKind.Utc));
            }
        }

        return days;
    }

    /// <summary>The partition of <paramref name="table"/> for <paramref name="day"/>: <c>table_YYYYMMDD</c>.</summary>
    internal static string PartitionName(string table, DateTime day) => string.Create(CultureInfo.InvariantCulture, $"{table}_{day:yyyyMMdd}");

    private static DateTime Day(DateTimeOffset time) => DateTime.SpecifyKind(time.UtcDateTime.Date, DateTimeKind.Utc);

    private static string Literal(DateTime utc) => string.Create(CultureInfo.InvariantCulture, $"'{utc:yyyy-MM-dd HH:mm:ss}+00'::timestamptz");
}
