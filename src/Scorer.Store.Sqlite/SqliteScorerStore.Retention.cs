using Microsoft.Data.Sqlite;

namespace Scorer.Store.Sqlite;

/// <summary>The retention: old predictions, outcomes and outcome conflicts deleted in short batches.</summary>
public sealed partial class SqliteScorerStore
{
    /// <summary>
    /// Deletes what has left the retention as of <paramref name="now"/>, in batches of at most
    /// <see cref="SqliteStoreOptions.PruneBatchSize"/> rows, each its own short write transaction, so that every other
    /// writer (the prediction log's above all) waits for one batch at most, never for the whole pass. Nothing when the
    /// store keeps predictions forever (no <see cref="SqliteStoreOptions.PredictionRetention"/>).
    /// </summary>
    /// <remarks>
    /// <para>
    /// Predictions: the log is walked in the order it was written (rowid), batch by batch, while rows are older than
    /// the retention; the walk ends at the first row that is not (a row logged late with an early time is reached by
    /// a later pass, once the rows written before it have left the retention too). An old prediction is deleted when
    /// (a) its outcome is recorded (reported, or an implicit 0 once its model's horizon passed), or (b) its model has
    /// no version left that is live or shadow: no outcome is expected for a model that no longer serves. Every other
    /// old prediction awaits its outcome: it is kept, however old, and counted in
    /// <see cref="PruneResult.KeptAwaitingOutcome"/>. So no prediction is deleted while its model's horizon runs, and
    /// the implicit-negative sweep never misses one. The row written last is never deleted either (and is counted as
    /// kept): SQLite gives a new row the highest rowid plus one, and the sweep's cursor relies on rowids never
    /// being given twice.
    /// </para>
    /// <para>
    /// Outcomes (with <see cref="SqliteStoreOptions.OutcomeRetention"/>): those whose prediction was scored before the
    /// outcome retention and whose prediction is gone (an outcome is never deleted before its
    /// prediction, which would then pass for one awaiting its outcome), model by model along the index by model and
    /// time. Outcome conflicts: those reported before the outcome retention, in the order they were written.
    /// </para>
    /// <para>
    /// What stays: the per-minute and drift counts, the labelled summaries, the registry. Deleted rows free pages
    /// inside the file, which later writes use again (and which count as room under
    /// <see cref="SqliteStoreOptions.MaxSizeBytes"/>); the file itself does not shrink unless it is vacuumed.
    /// </para>
    /// </remarks>
    public async Task<PruneResult> PruneAsync(DateTimeOffset now, CancellationToken cancellationToken = default)
    {
        ObjectDisposedException.ThrowIf(_disposed, this);
        if (Options.PredictionRetention is not { } retention)
        {
            return PruneResult.None;
        }

        var batch = Options.PruneBatchSize;
        var batches = 0;
        var longest = TimeSpan.Zero;
        void Took(TimeSpan t)
        {
            batches++;
            longest = t > longest ? t : longest;
        }

        // Predictions, in write order while they are old.
        var cutoff = StoreTime.ToUnixMicroseconds(StoreTime.SafeSubtract(now, retention));
        long deleted = 0, kept = 0, after = 0;
        while (true)
        {
            cancellationToken.ThrowIfCancellationRequested();
            var (last, old, end) = await OldWindowAsync(after, cutoff, batch, cancellationToken).ConfigureAwait(false);
            if (old > 0)
            {
                var from = after;
                var gone = await WriteAsync(
                    (connection, transaction) =>
                    {
                        using var delete = Command(connection, transaction,
                            "DELETE FROM predictions WHERE rowid > $from AND rowid <= $last AND scored_at < $cutoff "
                            + "AND rowid < (SELECT max(rowid) FROM predictions) "
                            + "AND (model NOT IN (SELECT model FROM model_versions WHERE stage <> 'retired') "
                            + "  OR EXISTS (SELECT 1 FROM outcomes o WHERE o.prediction_id = predictions.id));");
                        delete.Parameters.AddWithValue("$from", from);
                        delete.Parameters.AddWithValue("$last", last);
                        delete.Parameters.AddWithValue("$cutoff", cutoff);
                        return delete.ExecuteNonQuery();
                    },
                    cancellationToken,
                    Took).ConfigureAwait(false);
                deleted += gone;
                kept += old - gone;
                after = last;
            }

            if (end)
            {
                break;
            }
        }

        long outcomesDeleted = 0, conflictsDeleted = 0;
        if (Options.OutcomeRetention is { } outcomeRetention)
        {
            var outcomeCutoff = StoreTime.ToUnixMicroseconds(StoreTime.SafeSubtract(now, outcomeRetention));
            for (var model = await NextOutcomeModelAsync(null, cancellationToken).ConfigureAwait(false);
                 model is not null;
                 model = await NextOutcomeModelAsync(model, cancellationToken).ConfigureAwait(false))
            {
                int gone;
                do
                {
                    cancellationToken.ThrowIfCancellationRequested();
                    var of = model;
                    gone = await WriteAsync(
                        (connection, transaction) =>
                        {
                            using var delete = Command(connection, transaction,
                                "DELETE FROM outcomes WHERE rowid IN (SELECT o.rowid FROM outcomes o WHERE o.model = $model AND o.scored_at < $cutoff "
                                + "AND NOT EXISTS (SELECT 1 FROM predictions p WHERE p.id = o.prediction_id) LIMIT $batch);");
                            delete.Parameters.AddWithValue("$model", of);
                            delete.Parameters.AddWithValue("$cutoff", outcomeCutoff);
                            delete.Parameters.AddWithValue("$batch", batch);
                            return delete.ExecuteNonQuery();
                        },
                        cancellationToken,
                        Took).ConfigureAwait(false);
                    outcomesDeleted += gone;
                }
                while (gone == batch);
            }

            // Conflicts, in the order they were written while they are old (their time is when the report came).
            while (true)
            {
                cancellationToken.ThrowIfCancellationRequested();
                var (last, old, end) = await OldConflictsAsync(outcomeCutoff, batch, cancellationToken).ConfigureAwait(false);
                if (old > 0)
                {
                    conflictsDeleted += await WriteAsync(
                        (connection, transaction) =>
                        {
                            using var delete = Command(connection, transaction, "DELETE FROM outcome_conflicts WHERE id <= $last AND at < $cutoff;");
                            delete.Parameters.AddWithValue("$last", last);
                            delete.Parameters.AddWithValue("$cutoff", outcomeCutoff);
                            return delete.ExecuteNonQuery();
                        },
                        cancellationToken,
                        Took).ConfigureAwait(false);
                }

                if (end)
                {
                    break;
                }
            }
        }

        return new PruneResult(deleted, kept, outcomesDeleted, conflictsDeleted) { Batches = batches, LongestBatch = longest };
    }

    /// <summary>
    /// Outside any write transaction: of the next <paramref name="batch"/> predictions after rowid
    /// <paramref name="after"/>, the leading run scored before <paramref name="cutoff"/>: its last rowid and its length,
    /// and whether the walk ends with it (a younger row met, or the log's end).
    /// </summary>
    private async Task<(long Last, long Old, bool End)> OldWindowAsync(long after, long cutoff, int batch, CancellationToken cancellationToken)
    {
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        using var read = Command(connection, null, "SELECT rowid, scored_at FROM predictions WHERE rowid > $after ORDER BY rowid LIMIT $batch;");
        read.Parameters.AddWithValue("$after", after);
        read.Parameters.AddWithValue("$batch", batch);
        using var reader = await read.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
        long last = after, old = 0, rows = 0;
        while (await reader.ReadAsync(cancellationToken).ConfigureAwait(false))
        {
            rows++;
            if (reader.GetInt64(1) >= cutoff)
            {
                return (last, old, true);
            }

            last = reader.GetInt64(0);
            old++;
        }

        return (last, old, rows < batch);
    }

    /// <summary>As <see cref="OldWindowAsync"/>, for the first outcome conflicts (those left after the earlier batches).</summary>
    private async Task<(long Last, long Old, bool End)> OldConflictsAsync(long cutoff, int batch, CancellationToken cancellationToken)
    {
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        using var read = Command(connection, null, "SELECT id, at FROM outcome_conflicts ORDER BY id LIMIT $batch;");
        read.Parameters.AddWithValue("$batch", batch);
        using var reader = await read.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
        long last = 0, old = 0, rows = 0;
        while (await reader.ReadAsync(cancellationToken).ConfigureAwait(false))
        {
            rows++;
            if (reader.GetInt64(1) >= cutoff)
            {
                return (last, old, true);
            }

            last = reader.GetInt64(0);
            old++;
        }

        return (last, old, rows < batch);
    }

    /// <summary>The first model of the outcomes after <paramref name="after"/> (ordinal), or null: one seek of the index by model and time.</summary>
    private async Task<string?> NextOutcomeModelAsync(string? after, CancellationToken cancellationToken)
    {
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        using var next = Command(connection, null,
            after is null ? "SELECT min(model) FROM outcomes;" : "SELECT min(model) FROM outcomes WHERE model > $after;");
        if (after is not null)
        {
            next.Parameters.AddWithValue("$after", after);
        }

        return await next.ExecuteScalarAsync(cancellationToken).ConfigureAwait(false) as string;
    }
}
