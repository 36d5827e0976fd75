using Npgsql;

namespace Scorer.Store.Postgres;

/// <summary>The prediction log's retention (pruning).</summary>
public sealed partial class PostgresScorerStore
{
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
            return PruneResult.None;
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
        command.Parameters.Add(Timestamp(StoreTime.SafeSubtract(now, retention)));
        await using var reader = await command.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
        await reader.ReadAsync(cancellationToken).ConfigureAwait(false);
        return new PruneResult(reader.GetInt64(0), reader.GetInt64(1));
    }
}
