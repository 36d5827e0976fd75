using System.Globalization;
using Npgsql;
using NpgsqlTypes;

namespace Scorer.Store.Postgres;

/// <summary>Outcomes, implicit negatives, the labelled change feed and the prediction log's retention.</summary>
public sealed partial class PostgresScorerStore
{
    /// <summary>
    /// Every prediction of the model that a batch's reports reach, with its recorded outcome (NULLs when none): by its
    /// own id, as a shadow paired with a reported id (live_id), and by key (with the key). Index lookups, one
    /// statement; the caller holds the model's outcome lock, so what it reads stays as read until it commits.
    /// </summary>
    private const string TargetsSql =
        "SELECT p.id, p.version, p.stage, p.scored_at, p.eta, p.probability, p.live_id, o.outcome, o.implicit, NULL::text "
        + "FROM predictions p LEFT JOIN outcomes o ON o.prediction_id = p.id WHERE p.model = $1 AND p.id = ANY($2) "
        + "UNION ALL SELECT p.id, p.version, p.stage, p.scored_at, p.eta, p.probability, p.live_id, o.outcome, o.implicit, NULL::text "
        + "FROM predictions p LEFT JOIN outcomes o ON o.prediction_id = p.id WHERE p.model = $1 AND p.live_id = ANY($2) "
        + "UNION ALL SELECT p.id, p.version, p.stage, p.scored_at, p.eta, p.probability, p.live_id, o.outcome, o.implicit, p.\"key\" "
        + "FROM predictions p LEFT JOIN outcomes o ON o.prediction_id = p.id WHERE p.model = $1 AND p.\"key\" = ANY($3)";

    private const string InsertOutcomesSql =
        "INSERT INTO outcomes (prediction_id, model, version, stage, scored_at, eta, probability, outcome, observed_at, recorded_at, implicit, live_id) "
        + "SELECT u.id, $1, u.version, u.stage, u.scored_at, u.eta, u.probability, u.outcome, u.observed_at, $2, false, u.live_id "
        + "FROM unnest($3::uuid[], $4::text[], $5::text[], $6::timestamptz[], $7::float8[], $8::float8[], $9::smallint[], $10::timestamptz[], $11::uuid[]) "
        + "AS u(id, version, stage, scored_at, eta, probability, outcome, observed_at, live_id)";

    private const string UpdateOutcomesSql =
        "UPDATE outcomes o SET outcome = u.outcome, observed_at = u.observed_at, recorded_at = $1, implicit = false, change = pg_current_xact_id() "
        + "FROM unnest($2::uuid[], $3::smallint[], $4::timestamptz[]) AS u(id, outcome, observed_at) WHERE o.prediction_id = u.id";

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
    /// are applied in memory, in the SQLite driver's order and with its rules (<see cref="OutcomeApplication"/>),
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
        ArgumentException.ThrowIfNullOrEmpty(model);
        ArgumentNullException.ThrowIfNull(reports);
        for (var i = 0; i < reports.Count; i++)
        {
            var r = reports[i] ?? throw new ArgumentException($"reports[{i}] is null.", nameof(reports));
            if (r.Id is null == string.IsNullOrEmpty(r.Key))
            {
                throw new ArgumentException($"reports[{i}] must give either an id or a key.", nameof(reports));
            }

            if (r.Outcome > 1)
            {
                throw new ArgumentException($"reports[{i}] has outcome {r.Outcome}; outcomes are 0 or 1.", nameof(reports));
            }

        }

        if (!Enum.IsDefined(policy))
        {
            throw new ArgumentOutOfRangeException(nameof(policy), policy, "Not a conflict policy: expected KeepFirst or TakeLatest.");
        }

        var ids = reports.Where(r => r.Id is not null).Select(r => r.Id!.Value).Distinct().ToArray();
        // A key holding U+0000 is left out of the lookup (PostgreSQL text cannot hold it, so no prediction has it): it is unknown.
        var keys = reports.Where(r => r.Id is null && !r.Key!.Contains('\0', StringComparison.Ordinal)).Select(r => r.Key!).Distinct(StringComparer.Ordinal).ToArray();
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
                    || (ex.SqlState == PostgresErrorCodes.UniqueViolation && ex.ConstraintName == "outcomes_pkey")))
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
        var targets = new Dictionary<Guid, OutcomeTarget>();
        var shadowsOf = new Dictionary<Guid, List<Guid>>();
        var byKey = new Dictionary<string, List<Guid>>(StringComparer.Ordinal);
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
            read.BatchCommands.Add(targetsOf);

            await using var reader = await read.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
            await reader.NextResultAsync(cancellationToken).ConfigureAwait(false);
            while (await reader.ReadAsync(cancellationToken).ConfigureAwait(false))
            {
                var target = new OutcomeTarget(reader.GetGuid(0), reader.GetString(1), reader.GetString(2), reader.GetDateTime(3), reader.GetDouble(4),
                    reader.GetDouble(5), reader.IsDBNull(6) ? null : reader.GetGuid(6));
                if (targets.TryAdd(target.Id, target))
                {
                    if (target.LiveId is { } live)
                    {
                        Add(shadowsOf, live, target.Id);
                    }

                    if (!reader.IsDBNull(7))
                    {
                        recorded[target.Id] = new RecordedOutcome((byte)reader.GetInt16(7), reader.GetBoolean(8));
                    }
                }

                if (!reader.IsDBNull(9))
                {
                    Add(byKey, reader.GetString(9), target.Id);
                }
            }
        }

        // (2) The reports applied in memory, then the net writes in one round trip.
        var applied = OutcomeApplication.Apply(reports, targets, shadowsOf, byKey, recorded, policy);
        var write = new NpgsqlBatch(connection, transaction);
        await using (write.ConfigureAwait(false))
        {
            var now = PostgresValues.ToTimestamp(recordedAt);
            NpgsqlBatchCommand? insert = null;
            if (applied.Inserts.Count > 0)
            {
                var rows = applied.Inserts;
                insert = new NpgsqlBatchCommand(InsertOutcomesSql);
                insert.Parameters.Add(Text(model));
                insert.Parameters.Add(new NpgsqlParameter<DateTime> { TypedValue = now, NpgsqlDbType = NpgsqlDbType.TimestampTz });
                insert.Parameters.Add(UuidArray([.. rows.Select(r => r.Target.Id)]));
                insert.Parameters.Add(TextArray([.. rows.Select(r => r.Target.Version)]));
                insert.Parameters.Add(TextArray([.. rows.Select(r => r.Target.Stage)]));
                insert.Parameters.Add(TimestampArray([.. rows.Select(r => (DateTime?)r.Target.ScoredAt)]));
                insert.Parameters.Add(DoubleArray([.. rows.Select(r => r.Target.Eta)]));
                insert.Parameters.Add(DoubleArray([.. rows.Select(r => r.Target.Probability)]));
                insert.Parameters.Add(SmallintArray([.. rows.Select(r => (short)r.Outcome)]));
                insert.Parameters.Add(TimestampArray([.. rows.Select(r => r.ObservedAt)]));
                insert.Parameters.Add(new NpgsqlParameter<Guid?[]> { TypedValue = [.. rows.Select(r => r.Target.LiveId)], NpgsqlDbType = NpgsqlDbType.Array | NpgsqlDbType.Uuid });
                write.BatchCommands.Add(insert);
            }

            if (applied.Updates.Count > 0)
            {
                var rows = applied.Updates;
                var update = new NpgsqlBatchCommand(UpdateOutcomesSql);
                update.Parameters.Add(new NpgsqlParameter<DateTime> { TypedValue = now, NpgsqlDbType = NpgsqlDbType.TimestampTz });
                update.Parameters.Add(UuidArray([.. rows.Select(r => r.Id)]));
                update.Parameters.Add(SmallintArray([.. rows.Select(r => (short)r.Outcome)]));
                update.Parameters.Add(TimestampArray([.. rows.Select(r => r.ObservedAt)]));
                write.BatchCommands.Add(update);
            }

            if (applied.Conflicts.Count > 0)
            {
                var rows = applied.Conflicts;
                var conflicts = new NpgsqlBatchCommand(InsertConflictsSql);
                conflicts.Parameters.Add(Text(model));
                conflicts.Parameters.Add(new NpgsqlParameter<DateTime> { TypedValue = now, NpgsqlDbType = NpgsqlDbType.TimestampTz });
                conflicts.Parameters.Add(UuidArray([.. rows.Select(r => r.Id)]));
                conflicts.Parameters.Add(SmallintArray([.. rows.Select(r => (short)r.Recorded)]));
                conflicts.Parameters.Add(SmallintArray([.. rows.Select(r => (short)r.Reported)]));
                conflicts.Parameters.Add(SmallintArray([.. rows.Select(r => (short)r.Kept)]));
                conflicts.Parameters.Add(new NpgsqlParameter<bool[]> { TypedValue = [.. rows.Select(r => r.WasImplicit)], NpgsqlDbType = NpgsqlDbType.Array | NpgsqlDbType.Boolean });
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
                + "  WHERE NOT EXISTS (SELECT 1 FROM outcomes o WHERE o.prediction_id = m.id) ORDER BY m.id RETURNING 1), "
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

    /// <inheritdoc />
    /// <remarks>
    /// <para>
    /// Every insert or update of an outcome row stamps it with the id of its transaction (pg_current_xact_id(), xid8,
    /// column <c>change</c>); the read returns the model version's rows stamped at or above the cursor, in stamp order,
    /// and the cursor returned is one past the largest stamp read (or the cursor given, when nothing was read: it stays
    /// put while nothing changes).
    /// </para>
    /// <para>
    /// Neither transaction ids nor sequence numbers follow commit order in PostgreSQL: an id is handed out when a
    /// transaction first writes, and a transaction still in flight can hold a smaller id than one already committed; a
    /// reader that moved its cursor past the committed one would skip the other's change for good. What makes the
    /// stamps safe here is the model's outcome lock (see <see cref="RecordOutcomesAsync"/>): every writer of the model's
    /// outcomes, in any process, holds it exclusively from before its first write to its commit, and this read takes
    /// it shared (in the same implicit transaction, before its snapshot) for the length of one statement. So when the
    /// read's snapshot is taken no writer of the model is in flight: every change made so far is committed and
    /// visible, and every later writer takes its transaction id after the read, above every stamp read. The read never
    /// skips a change, returns a committed change at once (it is not held back by unrelated transactions in flight,
    /// as a bound at the snapshot's xmin would hold it back), and waits at most for one batch of the model's outcomes
    /// to commit.
    /// </para>
    /// <para>
    /// Stamps are xid8 values (epoch and transaction id, never wrapping), carried as longs.
    /// </para>
    /// </remarks>
    public async Task<LabelledChanges> GetLabelledChangesAsync(string model, string version, long cursor, CancellationToken cancellationToken = default)
    {
        ArgumentException.ThrowIfNullOrEmpty(model);
        ArgumentException.ThrowIfNullOrEmpty(version);
        ArgumentOutOfRangeException.ThrowIfNegative(cursor);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        var read = new NpgsqlBatch(connection);
        await using (read.ConfigureAwait(false))
        {
            // No explicit transaction: the batch is one implicit transaction, and the lock lasts until it ends.
            read.BatchCommands.Add(OutcomeLock(model, shared: true));
            var changes = new NpgsqlBatchCommand(
                "SELECT prediction_id, scored_at, probability, outcome, change::text::bigint FROM outcomes "
                + "WHERE model = $1 AND version = $2 AND change >= $3::text::xid8 ORDER BY change");
            changes.Parameters.Add(Text(model));
            changes.Parameters.Add(Text(version));
            changes.Parameters.Add(Text(cursor.ToString(CultureInfo.InvariantCulture)));
            read.BatchCommands.Add(changes);
            var points = new List<LabelledPoint>();
            var next = cursor;
            await using var reader = await read.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
            await reader.NextResultAsync(cancellationToken).ConfigureAwait(false);
            while (await reader.ReadAsync(cancellationToken).ConfigureAwait(false))
            {
                points.Add(new LabelledPoint(reader.GetGuid(0), PostgresValues.FromTimestamp(reader.GetDateTime(1)), reader.GetDouble(2), (byte)reader.GetInt16(3)));
                next = reader.GetInt64(4) + 1;
            }

            return new LabelledChanges(points, next);
        }
    }

    /// <summary>
    /// Deletes logged predictions scored more than <see cref="PostgresStoreOptions.PredictionRetention"/> before
    /// <paramref name="now"/> whose outcome is no longer awaited; nothing when the store keeps predictions forever (no
    /// retention set).
    /// </summary>
    /// <remarks>
    /// <para>
    /// The rule: an old prediction is deleted when (a) its outcome is recorded (reported, or an implicit 0), or (b) its
    /// model has no version left that is live or shadow in the registry's table (every version retired, or the model
    /// unknown to it): no outcome is expected for a model that no longer serves. Every other old prediction is kept,
    /// however old (its outcome, or its implicit 0 once the model's horizon passes, is still to come), and counted in
    /// <see cref="PruneResult.KeptAwaitingOutcome"/>, so a caller can log it.
    /// </para>
    /// <para>
    /// What a deletion leaves: the outcome rows (which carry their own copy of the prediction's time, η and
    /// probability: the monitor, the change feed and <see cref="GetLabelledAsync"/> are unchanged), the per-minute and
    /// drift counts. What it takes: the rows themselves, so <see cref="GetPredictionAsync"/>,
    /// <see cref="GetPredictionsAsync"/> and <see cref="CountPredictionsAsync"/> no longer see them,
    /// <see cref="GetLabelledRowsAsync"/> (which exports the logged features) leaves them out, and a report for a
    /// deleted prediction is listed as unknown. One statement, one transaction.
    /// </para>
    /// </remarks>
    public async Task<PruneResult> PruneAsync(DateTimeOffset now, CancellationToken cancellationToken = default)
    {
        if (Options.PredictionRetention is not { } retention)
        {
            ObjectDisposedException.ThrowIf(_disposed, this);
            return new PruneResult(0, 0);
        }

        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        await using var command = Command(connection, null,
            "WITH serving AS (SELECT DISTINCT model FROM model_versions WHERE stage <> 'retired'), "
            + "gone AS (DELETE FROM predictions p WHERE p.scored_at < $1 "
            + "  AND (EXISTS (SELECT 1 FROM outcomes o WHERE o.prediction_id = p.id) OR p.model NOT IN (SELECT model FROM serving)) RETURNING 1) "
            + "SELECT (SELECT count(*) FROM gone), "
            + "(SELECT count(*) FROM predictions p WHERE p.scored_at < $1 AND p.model IN (SELECT model FROM serving) "
            + "  AND NOT EXISTS (SELECT 1 FROM outcomes o WHERE o.prediction_id = p.id))");
        command.CommandTimeout = 0;
        command.Parameters.Add(Timestamp(SafeSubtract(now, retention)));
        await using var reader = await command.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
        await reader.ReadAsync(cancellationToken).ConfigureAwait(false);
        return new PruneResult(reader.GetInt64(0), reader.GetInt64(1));
    }

    private static DateTimeOffset SafeSubtract(DateTimeOffset time, TimeSpan span) =>
        time.UtcTicks - DateTimeOffset.MinValue.UtcTicks < span.Ticks ? DateTimeOffset.MinValue : time - span;

    /// <summary>
    /// The model's outcome lock (see <see cref="RecordOutcomesAsync"/>), held to the end of the transaction: exclusive
    /// for writers, shared for the change feed's read.
    /// </summary>
    private static NpgsqlBatchCommand OutcomeLock(string model, bool shared = false) =>
        new($"SELECT pg_advisory_xact_lock{(shared ? "_shared" : "")}({OutcomeLockClass}, hashtext(current_schema() || '.' || $1))") { Parameters = { Text(model) } };

    private static void Add<TKey>(Dictionary<TKey, List<Guid>> map, TKey key, Guid id)
        where TKey : notnull
    {
        if (!map.TryGetValue(key, out var list))
        {
            map[key] = list = [];
        }

        list.Add(id);
    }

    private static NpgsqlParameter<Guid[]> UuidArray(Guid[] values) => new() { TypedValue = values, NpgsqlDbType = NpgsqlDbType.Array | NpgsqlDbType.Uuid };

    private static NpgsqlParameter<double[]> DoubleArray(double[] values) => new() { TypedValue = values, NpgsqlDbType = NpgsqlDbType.Array | NpgsqlDbType.Double };

    private static NpgsqlParameter<short[]> SmallintArray(short[] values) => new() { TypedValue = values, NpgsqlDbType = NpgsqlDbType.Array | NpgsqlDbType.Smallint };

    private static NpgsqlParameter<DateTime?[]> TimestampArray(DateTime?[] values) =>
        new() { TypedValue = values, NpgsqlDbType = NpgsqlDbType.Array | NpgsqlDbType.TimestampTz };
}
