using System.Globalization;
using Npgsql;
using NpgsqlTypes;

namespace Scorer.Store.Postgres;

/// <summary>Outcome reports (by the shared rules), implicit negatives, and the model's outcome lock.</summary>
public sealed partial class PostgresScorerStore
{
    /// <summary>
    /// Every prediction of the model that a batch's reports reach, with its recorded outcome (NULLs when none): by its
    /// own id (in the partitions of the time the id carries, <see cref="IdTimes"/>, or through prediction_times), as a
    /// shadow paired with a reported id (live_id, every partition's index), and by key (with the key; every
    /// partition's index). Index lookups, one statement; the caller holds the model's outcome lock, so what it reads
    /// stays as read until it commits.
    /// </summary>
    private const string TargetsSql =
        "SELECT p.id, p.version, p.stage, p.scored_at, p.eta, p.probability, p.live_id, o.outcome, o.implicit, p.\"key\" "
        + "FROM unnest($2::uuid[], $4::timestamptz[], $5::timestamptz[]) AS u(id, from_at, to_at) "
        + "JOIN predictions p ON p.id = u.id AND p.scored_at >= u.from_at AND p.scored_at < u.to_at "
        + "LEFT JOIN outcomes o ON o.prediction_id = p.id AND o.scored_at = p.scored_at WHERE p.model = $1 "
        + "UNION ALL SELECT p.id, p.version, p.stage, p.scored_at, p.eta, p.probability, p.live_id, o.outcome, o.implicit, p.\"key\" "
        + "FROM prediction_times t JOIN predictions p ON p.id = t.id AND p.scored_at = t.scored_at "
        + "LEFT JOIN outcomes o ON o.prediction_id = p.id AND o.scored_at = p.scored_at WHERE t.id = ANY($2) AND p.model = $1 "
        + "UNION ALL SELECT p.id, p.version, p.stage, p.scored_at, p.eta, p.probability, p.live_id, o.outcome, o.implicit, p.\"key\" "
        + "FROM predictions p LEFT JOIN outcomes o ON o.prediction_id = p.id AND o.scored_at = p.scored_at WHERE p.model = $1 AND p.live_id = ANY($2) "
        + "UNION ALL SELECT p.id, p.version, p.stage, p.scored_at, p.eta, p.probability, p.live_id, o.outcome, o.implicit, p.\"key\" "
        + "FROM predictions p LEFT JOIN outcomes o ON o.prediction_id = p.id AND o.scored_at = p.scored_at WHERE p.model = $1 AND p.\"key\" = ANY($3)";

    private const string InsertOutcomesSql =
        "INSERT INTO outcomes (prediction_id, model, version, stage, scored_at, eta, probability, outcome, observed_at, recorded_at, implicit, live_id) "
        + "SELECT u.id, $1, u.version, u.stage, u.scored_at, u.eta, u.probability, u.outcome, u.observed_at, $2, false, u.live_id "
        + "FROM unnest($3::uuid[], $4::text[], $5::text[], $6::timestamptz[], $7::float8[], $8::float8[], $9::smallint[], $10::timestamptz[], $11::uuid[]) "
        + "AS u(id, version, stage, scored_at, eta, probability, outcome, observed_at, live_id)";

    private const string UpdateOutcomesSql =
        "UPDATE outcomes o SET outcome = u.outcome, observed_at = u.observed_at, recorded_at = $1, implicit = false, change = pg_current_xact_id(), revised = true "
        + "FROM unnest($2::uuid[], $3::smallint[], $4::timestamptz[], $5::timestamptz[]) AS u(id, outcome, observed_at, scored_at) "
        + "WHERE o.prediction_id = u.id AND o.scored_at = u.scored_at";

    private const string InsertConflictsSql =
        "INSERT INTO outcome_conflicts (prediction_id, model, recorded, reported, kept, was_implicit, at) "
        + "SELECT u.id, $1, u.recorded, u.reported, u.kept, u.was_implicit, $2 "
        + "FROM unnest($3::uuid[], $4::smallint[], $5::smallint[], $6::smallint[], $7::boolean[]) WITH ORDINALITY AS u(id, recorded, reported, kept, was_implicit, n) "
        + "ORDER BY u.n";

    /// <inheritdoc />
    /// <remarks>
    /// <para>
    /// Set-based, three round trips whatever the batch's size: (1) the model's outcome lock (writers of one model's
    /// outcomes take turns, here and in other processes, as the SQLite driver's writers do), then one statement reads
    /// every prediction the reports reach (by id, as paired shadows, by key) with its recorded outcome; (2) the reports
    /// are applied in memory, in the order and by the rules every driver shares (<see cref="OutcomeRules"/>),
    /// giving the receipt and the net writes, and one batch of statements makes them: new outcome rows, changed ones,
    /// conflict rows, each from arrays (unnest); (3) commit.
    /// </para>
    /// <para>
    /// The inserts are plain INSERTs (with ON CONFLICT DO NOTHING an insert cost about half as much again in server
    /// CPU, measured in psql on a log of a million rows): under the lock nothing else inserts these outcomes. Should something outside the
    /// store do so all the same, the insert fails on the primary key and the whole batch is rolled back and applied
    /// again, now seeing that row; a deadlock is retried the same way.
    /// </para>
    /// </remarks>
    public async Task<OutcomeReceipt> RecordOutcomesAsync(string model, IReadOnlyList<OutcomeReport> reports, ConflictPolicy policy, DateTimeOffset recordedAt,
        CancellationToken cancellationToken = default)
    {
        OutcomeRules.Check(model, reports, policy);
        var ids = OutcomeRules.Ids(reports);
        // A key holding U+0000 is left out of the lookup (PostgreSQL text cannot hold it, so no prediction has it): it is unknown.
        var keys = OutcomeRules.Keys(reports).Where(k => !k.Contains('\0', StringComparison.Ordinal)).ToArray();
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        for (var attempt = 1; ; attempt++)
        {
            await using var transaction = await connection.BeginTransactionAsync(cancellationToken).ConfigureAwait(false);
            try
            {
                var receipt = await TryRecordOutcomesAsync(connection, transaction, model, reports, ids, keys, policy, recordedAt, cancellationToken)
                    .ConfigureAwait(false);
                if (receipt is not null)
                {
                    await transaction.CommitAsync(cancellationToken).ConfigureAwait(false);
                    return receipt;
                }
            }
            catch (PostgresException ex) when (attempt < OutcomeAttempts
                && (ex.SqlState is PostgresErrorCodes.DeadlockDetected or PostgresErrorCodes.SerializationFailure
                    || (ex.SqlState == PostgresErrorCodes.UniqueViolation && IsOutcomeKey(ex.ConstraintName))))
            {
            }

            await transaction.RollbackAsync(CancellationToken.None).ConfigureAwait(false);
            if (attempt >= OutcomeAttempts)
            {
                throw new InvalidOperationException(
                    $"No outcome was recorded: {OutcomeAttempts} attempts in a row met concurrent writers recording outcomes of the same predictions of model {model}.");
            }
        }
    }

    /// <summary>One attempt at a batch of outcome reports inside <paramref name="transaction"/>; null when it must be tried again.</summary>
    private static async Task<OutcomeReceipt?> TryRecordOutcomesAsync(NpgsqlConnection connection, NpgsqlTransaction transaction, string model,
        IReadOnlyList<OutcomeReport> reports, Guid[] ids, string[] keys, ConflictPolicy policy, DateTimeOffset recordedAt, CancellationToken cancellationToken)
    {
        var rows = new Dictionary<Guid, OutcomeRow>();
        var targets = new List<OutcomeTarget>();
        var recorded = new Dictionary<Guid, RecordedOutcome>();

        // (1) The model's outcome lock, then everything the reports reach with its recorded outcome, in one round trip.
        var read = new NpgsqlBatch(connection, transaction);
        await using (read.ConfigureAwait(false))
        {
            read.BatchCommands.Add(OutcomeLock(model));
            var targetsOf = new NpgsqlBatchCommand(TargetsSql);
            targetsOf.Parameters.Add(Text(model));
            targetsOf.Parameters.Add(UuidArray(ids));
            targetsOf.Parameters.Add(TextArray(keys));
            var windows = ids.Select(IdTimes.Window).ToArray();
            targetsOf.Parameters.Add(TimestampArray([.. windows.Select(w => w.From)]));
            targetsOf.Parameters.Add(TimestampArray([.. windows.Select(w => w.To)]));
            read.BatchCommands.Add(targetsOf);

            await using var reader = await read.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
            await reader.NextResultAsync(cancellationToken).ConfigureAwait(false);
            while (await reader.ReadAsync(cancellationToken).ConfigureAwait(false))
            {
                var row = new OutcomeRow(reader.GetGuid(0), reader.GetString(1), reader.GetString(2), reader.GetDateTime(3), reader.GetDouble(4),
                    reader.GetDouble(5), reader.IsDBNull(6) ? null : reader.GetGuid(6));
                if (rows.TryAdd(row.Id, row))
                {
                    targets.Add(new OutcomeTarget(row.Id, row.LiveId, reader.IsDBNull(9) ? null : reader.GetString(9)));
                    if (!reader.IsDBNull(7))
                    {
                        recorded[row.Id] = new RecordedOutcome((byte)reader.GetInt16(7), reader.GetBoolean(8));
                    }
                }
            }
        }

        // (2) The reports applied in memory by the shared rules, then the net writes in one round trip.
        var applied = OutcomeRules.Apply(reports, targets, recorded, policy);
        var write = new NpgsqlBatch(connection, transaction);
        await using (write.ConfigureAwait(false))
        {
            var now = PostgresValues.ToTimestamp(recordedAt);
            NpgsqlBatchCommand? insert = null;
            if (applied.Inserts.Count > 0)
            {
                var inserts = applied.Inserts.Select(w => (Write: w, Row: rows[w.Id])).ToArray();
                insert = new NpgsqlBatchCommand(InsertOutcomesSql);
                insert.Parameters.Add(Text(model));
                insert.Parameters.Add(new NpgsqlParameter<DateTime> { TypedValue = now, NpgsqlDbType = NpgsqlDbType.TimestampTz });
                insert.Parameters.Add(UuidArray([.. inserts.Select(r => r.Row.Id)]));
                insert.Parameters.Add(TextArray([.. inserts.Select(r => r.Row.Version)]));
                insert.Parameters.Add(TextArray([.. inserts.Select(r => r.Row.Stage)]));
                insert.Parameters.Add(TimestampArray([.. inserts.Select(r => (DateTime?)r.Row.ScoredAt)]));
                insert.Parameters.Add(DoubleArray([.. inserts.Select(r => r.Row.Eta)]));
                insert.Parameters.Add(DoubleArray([.. inserts.Select(r => r.Row.Probability)]));
                insert.Parameters.Add(SmallintArray([.. inserts.Select(r => (short)r.Write.Outcome)]));
                insert.Parameters.Add(TimestampArray([.. inserts.Select(r => PostgresValues.ToTimestamp(r.Write.ObservedAt))]));
                insert.Parameters.Add(new NpgsqlParameter<Guid?[]> { TypedValue = [.. inserts.Select(r => r.Row.LiveId)], NpgsqlDbType = NpgsqlDbType.Array | NpgsqlDbType.Uuid });
                write.BatchCommands.Add(insert);
            }

            if (applied.Updates.Count > 0)
            {
                var updates = applied.Updates;
                var update = new NpgsqlBatchCommand(UpdateOutcomesSql);
                update.Parameters.Add(new NpgsqlParameter<DateTime> { TypedValue = now, NpgsqlDbType = NpgsqlDbType.TimestampTz });
                update.Parameters.Add(UuidArray([.. updates.Select(r => r.Id)]));
                update.Parameters.Add(SmallintArray([.. updates.Select(r => (short)r.Outcome)]));
                update.Parameters.Add(TimestampArray([.. updates.Select(r => PostgresValues.ToTimestamp(r.ObservedAt))]));
                update.Parameters.Add(TimestampArray([.. updates.Select(r => (DateTime?)rows[r.Id].ScoredAt)]));
                write.BatchCommands.Add(update);
            }

            if (applied.Conflicts.Count > 0)
            {
                var conflictRows = applied.Conflicts;
                var conflicts = new NpgsqlBatchCommand(InsertConflictsSql);
                conflicts.Parameters.Add(Text(model));
                conflicts.Parameters.Add(new NpgsqlParameter<DateTime> { TypedValue = now, NpgsqlDbType = NpgsqlDbType.TimestampTz });
                conflicts.Parameters.Add(UuidArray([.. conflictRows.Select(r => r.Id)]));
                conflicts.Parameters.Add(SmallintArray([.. conflictRows.Select(r => (short)r.Recorded)]));
                conflicts.Parameters.Add(SmallintArray([.. conflictRows.Select(r => (short)r.Reported)]));
                conflicts.Parameters.Add(SmallintArray([.. conflictRows.Select(r => (short)r.Kept)]));
                conflicts.Parameters.Add(new NpgsqlParameter<bool[]> { TypedValue = [.. conflictRows.Select(r => r.WasImplicit)], NpgsqlDbType = NpgsqlDbType.Array | NpgsqlDbType.Boolean });
                write.BatchCommands.Add(conflicts);
            }

            if (write.BatchCommands.Count > 0)
            {
                await write.ExecuteNonQueryAsync(cancellationToken).ConfigureAwait(false);
            }

            if (insert is not null && insert.RecordsAffected != applied.Inserts.Count)
            {
                return null; // cannot happen with a plain INSERT; were it to, the batch is applied again
            }
        }

        return applied.Receipt;
    }

    /// <inheritdoc />
    /// <remarks>
    /// <para>
    /// The log is walked in log_seq order (the order rows were written) from the model's cursor. log_seq comes from
    /// the batch number each write takes from the sequence prediction_batches, and numbers are taken when rows are
    /// written, not when they commit: a batch still in flight can hold numbers below those of a batch already
    /// committed, and a walk that moved its cursor past them would never come back. So the walk first finds a horizon
    /// below which every number is settled: it takes the log's advisory lock exclusively (every prediction write holds
    /// it shared, from before it takes its number to its commit), which waits for the writes in flight to end, reads
    /// the last batch number taken, and lets go at once (one short transaction; new writes wait only that long). Rows
    /// up to the horizon are then final, and the walk never passes it.
    /// </para>
    /// <para>
    /// The walk itself is one statement, in one transaction holding the model's outcome lock (see
    /// <see cref="RecordOutcomesAsync"/>): up to <paramref name="limit"/> rows of the model after the cursor, stopping
    /// at the first one not yet mature (so a row logged late with an early time is still reached by a later call), an
    /// implicit 0 inserted for each mature row without an outcome, and the cursor moved to the last mature row walked.
    /// </para>
    /// </remarks>
    public async Task<int> RecordImplicitNegativesAsync(string model, DateTimeOffset maturedBefore, DateTimeOffset recordedAt, int limit = 10_000,
        CancellationToken cancellationToken = default)
    {
        ArgumentException.ThrowIfNullOrEmpty(model);
        ArgumentOutOfRangeException.ThrowIfLessThan(limit, 1);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);

        long horizon;
        var settle = new NpgsqlBatch(connection);
        await using (settle.ConfigureAwait(false))
        {
            // No explicit transaction: the batch runs as one implicit transaction, which ends (and lets go of the lock) with it.
            settle.BatchCommands.Add(new NpgsqlBatchCommand($"SELECT pg_advisory_xact_lock({LogLockKey})"));
            settle.BatchCommands.Add(new NpgsqlBatchCommand("SELECT pg_sequence_last_value('prediction_batches')"));
            await using var reader = await settle.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
            await reader.NextResultAsync(cancellationToken).ConfigureAwait(false);
            await reader.ReadAsync(cancellationToken).ConfigureAwait(false);

            // The last row the last batch number taken can hold; -1 (nothing to walk) before the first batch.
            horizon = reader.IsDBNull(0) ? -1 : (reader.GetInt64(0) * RowsPerBatchNumber) + RowsPerBatchNumber - 1;
        }

        var sweep = new NpgsqlBatch(connection);
        await using (sweep.ConfigureAwait(false))
        {
            sweep.BatchCommands.Add(OutcomeLock(model));
            var walk = new NpgsqlBatchCommand(
                "WITH walk_from AS (SELECT coalesce((SELECT last_row FROM maturity_cursors WHERE model = $1), 0) AS after), "
                + "walk AS (SELECT p.log_seq, p.id, p.version, p.stage, p.scored_at, p.eta, p.probability, p.live_id FROM predictions p, walk_from c "
                + "  WHERE p.model = $1 AND p.log_seq > c.after AND p.log_seq <= $2 ORDER BY p.log_seq LIMIT $3), "
                + "stop AS (SELECT coalesce(min(log_seq), 9223372036854775807) AS at FROM walk WHERE scored_at >= $4), "
                + "mature AS (SELECT w.* FROM walk w, stop s WHERE w.log_seq < s.at), "
                + "labelled AS (INSERT INTO outcomes (prediction_id, model, version, stage, scored_at, eta, probability, outcome, observed_at, recorded_at, implicit, live_id) "
                + "  SELECT m.id, $1, m.version, m.stage, m.scored_at, m.eta, m.probability, 0, NULL, $5, true, m.live_id FROM mature m "
                + "  WHERE NOT EXISTS (SELECT 1 FROM outcomes o WHERE o.prediction_id = m.id AND o.scored_at = m.scored_at) ORDER BY m.id RETURNING 1), "
                + "moved AS (INSERT INTO maturity_cursors (model, last_row) SELECT $1, max(log_seq) FROM mature HAVING count(*) > 0 "
                + "  ON CONFLICT (model) DO UPDATE SET last_row = excluded.last_row RETURNING 1) "
                + "SELECT (SELECT count(*) FROM labelled)::integer, (SELECT count(*) FROM moved)::integer");
            walk.Parameters.Add(Text(model));
            walk.Parameters.Add(Bigint(horizon));
            walk.Parameters.Add(new NpgsqlParameter<int> { TypedValue = limit, NpgsqlDbType = NpgsqlDbType.Integer });
            walk.Parameters.Add(Timestamp(maturedBefore));
            walk.Parameters.Add(Timestamp(recordedAt));
            sweep.BatchCommands.Add(walk);
            await using var reader = await sweep.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
            await reader.NextResultAsync(cancellationToken).ConfigureAwait(false);
            await reader.ReadAsync(cancellationToken).ConfigureAwait(false);
            return reader.GetInt32(0);
        }
    }

    /// <summary>
    /// The model's outcome lock (see <see cref="RecordOutcomesAsync"/>), held to the end of the transaction: exclusive
    /// for writers, shared for the change feed's read.
    /// </summary>
    private static NpgsqlBatchCommand OutcomeLock(string model, bool shared = false) =>
        new($"SELECT pg_advisory_xact_lock{(shared ? "_shared" : "")}({OutcomeLockClass}, hashtext(current_schema() || '.' || $1))") { Parameters = { Text(model) } };

    /// <summary>Each outcome partition's primary key (outcomes_YYYYMMDD_pkey, outcomes_default_pkey).</summary>
    private static bool IsOutcomeKey(string? constraint) =>
        constraint is not null && constraint.StartsWith("outcomes_", StringComparison.Ordinal) && constraint.EndsWith("_pkey", StringComparison.Ordinal);

    /// <summary>A prediction an outcome report reaches, as read from the log: what a new outcome row copies in.</summary>
    private readonly record struct OutcomeRow(Guid Id, string Version, string Stage, DateTime ScoredAt, double Eta, double Probability, Guid? LiveId);

    private static NpgsqlParameter<Guid[]> UuidArray(Guid[] values) => new() { TypedValue = values, NpgsqlDbType = NpgsqlDbType.Array | NpgsqlDbType.Uuid };

    private static NpgsqlParameter<double[]> DoubleArray(double[] values) => new() { TypedValue = values, NpgsqlDbType = NpgsqlDbType.Array | NpgsqlDbType.Double };

    private static NpgsqlParameter<short[]> SmallintArray(short[] values) => new() { TypedValue = values, NpgsqlDbType = NpgsqlDbType.Array | NpgsqlDbType.Smallint };

    private static NpgsqlParameter<DateTime?[]> TimestampArray(DateTime?[] values) =>
        new() { TypedValue = values, NpgsqlDbType = NpgsqlDbType.Array | NpgsqlDbType.TimestampTz };
}
