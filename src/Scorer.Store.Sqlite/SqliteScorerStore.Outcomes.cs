using System.Globalization;
using Microsoft.Data.Sqlite;

namespace Scorer.Store.Sqlite;

/// <summary>Outcome reports (by the shared rules), implicit negatives, and the change numbers of the labelled change feed.</summary>
public sealed partial class SqliteScorerStore
{
    /// <inheritdoc />
    /// <remarks>
    /// In one write transaction: the predictions the reports reach are read with their recorded outcomes (one index
    /// lookup per distinct id, which also finds the shadows paired with it, and one per distinct key, in id order), the
    /// reports are applied in memory by the rules every driver shares (<see cref="OutcomeRules"/>), and the net writes
    /// are made: new outcome rows, changed ones, conflict rows, all stamped with one change number.
    /// </remarks>
    public Task<OutcomeReceipt> RecordOutcomesAsync(string model, IReadOnlyList<OutcomeReport> reports, ConflictPolicy policy, DateTimeOffset recordedAt,
        CancellationToken cancellationToken = default)
    {
        OutcomeRules.Check(model, reports, policy);
        var ids = OutcomeRules.Ids(reports);
        var keys = OutcomeRules.Keys(reports);
        var now = StoreTime.ToUnixMicroseconds(recordedAt);
        return WriteAsync(
            (connection, transaction) =>
            {
                // (1) What the reports reach, with its recorded outcome.
                var rows = new Dictionary<Guid, OutcomeRow>();
                var targets = new List<OutcomeTarget>();
                var recorded = new Dictionary<Guid, RecordedOutcome>();
                const string Reached = "SELECT p.id, p.version, p.stage, p.scored_at, p.eta, p.probability, p.live_id, p.\"key\", o.outcome, o.implicit "
                    + "FROM predictions p LEFT JOIN outcomes o ON o.prediction_id = p.id WHERE p.model = $model ";
                using var byId = Command(connection, transaction, Reached + "AND (p.id = $id OR p.live_id = $id);");
                byId.Parameters.AddWithValue("$model", model);
                var idParameter = byId.Parameters.Add("$id", SqliteType.Blob);
                using var byKey = Command(connection, transaction, Reached + "AND p.\"key\" = $key;");
                byKey.Parameters.AddWithValue("$model", model);
                var keyParameter = byKey.Parameters.Add("$key", SqliteType.Text);

                void Read(SqliteCommand find)
                {
                    cancellationToken.ThrowIfCancellationRequested();
                    using var reader = find.ExecuteReader();
                    while (reader.Read())
                    {
                        var row = new OutcomeRow(reader.GetFieldValue<byte[]>(0), reader.GetString(1), reader.GetString(2), reader.GetInt64(3), reader.GetDouble(4),
                            reader.GetDouble(5), reader.IsDBNull(6) ? null : reader.GetFieldValue<byte[]>(6));
                        var id = StoredValues.ToGuid(row.Id);
                        if (rows.TryAdd(id, row))
                        {
                            targets.Add(new OutcomeTarget(id, row.LiveId is null ? null : StoredValues.ToGuid(row.LiveId), reader.IsDBNull(7) ? null : reader.GetString(7)));
                            if (!reader.IsDBNull(8))
                            {
                                recorded[id] = new RecordedOutcome((byte)reader.GetInt64(8), reader.GetInt64(9) == 1);
                            }
                        }
                    }
                }

                foreach (var id in ids)
                {
                    idParameter.Value = StoredValues.ToBytes(id);
                    Read(byId);
                }

                foreach (var key in keys)
                {
                    keyParameter.Value = key;
                    Read(byKey);
                }

                // (2) The shared rules, then the writes they call for.
                var applied = OutcomeRules.Apply(reports, targets, recorded, policy);
                var change = NextChange(connection, transaction);
                if (applied.Inserts.Count > 0)
                {
                    using var insert = Command(connection, transaction,
                        "INSERT INTO outcomes (prediction_id, model, version, stage, scored_at, eta, probability, outcome, observed_at, recorded_at, implicit, live_id, change) "
                        + "VALUES ($id, $model, $version, $stage, $scoredAt, $eta, $p, $outcome, $observedAt, $now, 0, $liveId, $change);");
                    var insertId = insert.Parameters.Add("$id", SqliteType.Blob);
                    insert.Parameters.AddWithValue("$model", model);
                    var insertVersion = insert.Parameters.Add("$version", SqliteType.Text);
                    var insertStage = insert.Parameters.Add("$stage", SqliteType.Text);
                    var insertScoredAt = insert.Parameters.Add("$scoredAt", SqliteType.Integer);
                    var insertEta = insert.Parameters.Add("$eta", SqliteType.Real);
                    var insertP = insert.Parameters.Add("$p", SqliteType.Real);
                    var insertOutcome = insert.Parameters.Add("$outcome", SqliteType.Integer);
                    var insertObserved = insert.Parameters.Add("$observedAt", SqliteType.Integer);
                    var insertLiveId = insert.Parameters.Add("$liveId", SqliteType.Blob);
                    insert.Parameters.AddWithValue("$now", now);
                    insert.Parameters.AddWithValue("$change", change);
                    foreach (var write in applied.Inserts)
                    {
                        var t = rows[write.Id];
                        insertId.Value = t.Id;
                        insertVersion.Value = t.Version;
                        insertStage.Value = t.Stage;
                        insertScoredAt.Value = t.ScoredAt;
                        insertEta.Value = t.Eta;
                        insertP.Value = t.Probability;
                        insertOutcome.Value = (long)write.Outcome;
                        insertObserved.Value = Microseconds(write.ObservedAt);
                        insertLiveId.Value = t.LiveId is null ? DBNull.Value : t.LiveId;
                        insert.ExecuteNonQuery();
                    }
                }

                if (applied.Updates.Count > 0)
                {
                    using var update = Command(connection, transaction,
                        "UPDATE outcomes SET outcome = $outcome, observed_at = $observedAt, recorded_at = $now, implicit = 0, change = $change, revised = 1 WHERE prediction_id = $id;");
                    update.Parameters.AddWithValue("$change", change);
                    var updateOutcome = update.Parameters.Add("$outcome", SqliteType.Integer);
                    var updateObserved = update.Parameters.Add("$observedAt", SqliteType.Integer);
                    update.Parameters.AddWithValue("$now", now);
                    var updateId = update.Parameters.Add("$id", SqliteType.Blob);
                    foreach (var write in applied.Updates)
                    {
                        updateOutcome.Value = (long)write.Outcome;
                        updateObserved.Value = Microseconds(write.ObservedAt);
                        updateId.Value = StoredValues.ToBytes(write.Id);
                        update.ExecuteNonQuery();
                    }
                }

                if (applied.Conflicts.Count > 0)
                {
                    using var conflict = Command(connection, transaction,
                        "INSERT INTO outcome_conflicts (prediction_id, model, recorded, reported, kept, was_implicit, at) VALUES ($id, $model, $recorded, $reported, $kept, $implicit, $now);");
                    var conflictId = conflict.Parameters.Add("$id", SqliteType.Blob);
                    conflict.Parameters.AddWithValue("$model", model);
                    var conflictRecorded = conflict.Parameters.Add("$recorded", SqliteType.Integer);
                    var conflictReported = conflict.Parameters.Add("$reported", SqliteType.Integer);
                    var conflictKept = conflict.Parameters.Add("$kept", SqliteType.Integer);
                    var conflictImplicit = conflict.Parameters.Add("$implicit", SqliteType.Integer);
                    conflict.Parameters.AddWithValue("$now", now);
                    foreach (var c in applied.Conflicts)
                    {
                        conflictId.Value = StoredValues.ToBytes(c.Id);
                        conflictRecorded.Value = (long)c.Recorded;
                        conflictReported.Value = (long)c.Reported;
                        conflictKept.Value = (long)c.Kept;
                        conflictImplicit.Value = c.WasImplicit ? 1L : 0L;
                        conflict.ExecuteNonQuery();
                    }
                }

                return applied.Receipt;
            },
            cancellationToken);
    }

    private static object Microseconds(DateTimeOffset? time) => time is { } t ? StoreTime.ToUnixMicroseconds(t) : DBNull.Value;

    /// <summary>A prediction an outcome report reaches, as read from the log (ids as stored bytes, time in microseconds): what a new outcome row copies in.</summary>
    private sealed record OutcomeRow(byte[] Id, string Version, string Stage, long ScoredAt, double Eta, double Probability, byte[]? LiveId);

    /// <inheritdoc />
    public Task<int> RecordImplicitNegativesAsync(string model, DateTimeOffset maturedBefore, DateTimeOffset recordedAt, int limit = 10_000,
        CancellationToken cancellationToken = default)
    {
        ArgumentException.ThrowIfNullOrEmpty(model);
        ArgumentOutOfRangeException.ThrowIfLessThan(limit, 1);
        var cutoff = StoreTime.ToUnixMicroseconds(maturedBefore);
        var now = StoreTime.ToUnixMicroseconds(recordedAt);
        return WriteAsync(
            (connection, transaction) =>
            {
                using var cursor = Command(connection, transaction, "SELECT last_row FROM maturity_cursors WHERE model = $model;");
                cursor.Parameters.AddWithValue("$model", model);
                var from = cursor.ExecuteScalar() is long l ? l : 0L;

                // Walk the log in the order it was written. The walk stops at the first row of the model not yet mature,
                // so a row logged late with an early time is still reached by a later call.
                using var walk = Command(connection, transaction,
                    "SELECT rowid, id, version, stage, scored_at, eta, probability, live_id FROM predictions WHERE model = $model AND rowid > $from ORDER BY rowid LIMIT $limit;");
                walk.Parameters.AddWithValue("$model", model);
                walk.Parameters.AddWithValue("$from", from);
                walk.Parameters.AddWithValue("$limit", limit);
                using var insert = Command(connection, transaction,
                    "INSERT INTO outcomes (prediction_id, model, version, stage, scored_at, eta, probability, outcome, observed_at, recorded_at, implicit, live_id, change) "
                    + "VALUES ($id, $model, $version, $stage, $scoredAt, $eta, $p, 0, NULL, $now, 1, $liveId, $change) ON CONFLICT (prediction_id) DO NOTHING;");
                var id = insert.Parameters.Add("$id", SqliteType.Blob);
                insert.Parameters.AddWithValue("$model", model);
                var version = insert.Parameters.Add("$version", SqliteType.Text);
                var stage = insert.Parameters.Add("$stage", SqliteType.Text);
                var scoredAt = insert.Parameters.Add("$scoredAt", SqliteType.Integer);
                var eta = insert.Parameters.Add("$eta", SqliteType.Real);
                var p = insert.Parameters.Add("$p", SqliteType.Real);
                var liveId = insert.Parameters.Add("$liveId", SqliteType.Blob);
                insert.Parameters.AddWithValue("$now", now);
                insert.Parameters.AddWithValue("$change", NextChange(connection, transaction));
                var last = from;
                var recorded = 0;
                using (var reader = walk.ExecuteReader())
                {
                    while (reader.Read())
                    {
                        if (reader.GetInt64(4) >= cutoff)
                        {
                            break;
                        }

                        last = reader.GetInt64(0);
                        id.Value = reader.GetFieldValue<byte[]>(1);
                        version.Value = reader.GetString(2);
                        stage.Value = reader.GetString(3);
                        scoredAt.Value = reader.GetInt64(4);
                        eta.Value = reader.GetDouble(5);
                        p.Value = reader.GetDouble(6);
                        liveId.Value = reader.IsDBNull(7) ? DBNull.Value : reader.GetFieldValue<byte[]>(7);
                        recorded += insert.ExecuteNonQuery();
                    }
                }

                if (last != from)
                {
                    using var save = Command(connection, transaction,
                        "INSERT INTO maturity_cursors (model, last_row) VALUES ($model, $last) ON CONFLICT (model) DO UPDATE SET last_row = excluded.last_row;");
                    save.Parameters.AddWithValue("$model", model);
                    save.Parameters.AddWithValue("$last", last);
                    save.ExecuteNonQuery();
                }

                return recorded;
            },
            cancellationToken);
    }

    /// <summary>Takes the next outcome change number, inside the write transaction (see migration 0004).</summary>
    private static long NextChange(SqliteConnection connection, SqliteTransaction transaction)
    {
        using var next = Command(connection, transaction, "UPDATE outcome_change_counter SET last = last + 1 WHERE id = 1 RETURNING last;");
        return Convert.ToInt64(next.ExecuteScalar(), CultureInfo.InvariantCulture);
    }
}
