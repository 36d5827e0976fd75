using Npgsql;
using NpgsqlTypes;

namespace Scorer.Store.Postgres;

/// <summary>
/// Writes a batch of predictions with binary COPY, and the batch's per-minute counts, inside the caller's transaction.
/// </summary>
/// <remarks>
/// Binary COPY streams the rows in PostgreSQL's own binary formats: no SQL text per row, no parameters, doubles and
/// times exact. The per-minute counts are summed in memory first (a batch spans few versions and minutes), then
/// upserted in one statement, sorted so that concurrent writers lock the counter rows in one order.
/// </remarks>
internal static class PredictionCopy
{
    public const string CopySql =
        "COPY predictions (id, log_seq, model, version, stage, scored_at, \"key\", eta, probability, features, live_id) FROM STDIN (FORMAT BINARY)";

    public const string MinuteSql =
        "INSERT INTO prediction_minutes (model, version, minute, predictions) "
        + "SELECT * FROM unnest($1::text[], $2::text[], $3::bigint[], $4::bigint[]) "
        + "ON CONFLICT (model, version, minute) DO UPDATE SET predictions = prediction_minutes.predictions + excluded.predictions";

    /// <summary>Copies every row or throws; on a throw the caller's transaction must be rolled back.</summary>
    /// <exception cref="PostgresException">SQLSTATE 23505 on predictions_pkey: an id is already stored (or repeated).</exception>
    /// <param name="connection">The connection of the caller's transaction.</param>
    /// <param name="batch">The rows, checked.</param>
    /// <param name="firstSeq">The first row's log_seq; the next rows take the next numbers.</param>
    /// <param name="cancellationToken">Stops the copy (the transaction must then be rolled back).</param>
    public static async Task RunAsync(NpgsqlConnection connection, IReadOnlyList<PredictionRecord> batch, long firstSeq, CancellationToken cancellationToken)
    {
        await using var importer = await connection.BeginBinaryImportAsync(CopySql, cancellationToken).ConfigureAwait(false);

        // Row by row through the synchronous writes: they fill Npgsql's buffer and only block, briefly, when it is
        // flushed to the socket; the asynchronous ones cost an awaited call per field (measured with bench/Scorer.Bench
        // --postgres: about twice the client CPU per row).
        var seq = firstSeq;
        foreach (var row in batch)
        {
            cancellationToken.ThrowIfCancellationRequested();
            importer.StartRow();
            importer.Write(row.Id, NpgsqlDbType.Uuid);
            importer.Write(seq++, NpgsqlDbType.Bigint);
            importer.Write(row.Model, NpgsqlDbType.Text);
            importer.Write(row.Version, NpgsqlDbType.Text);
            importer.Write(PostgresValues.ToText(row.Stage), NpgsqlDbType.Text);
            importer.Write(PostgresValues.ToTimestamp(row.ScoredAt), NpgsqlDbType.TimestampTz);
            if (row.Key is null)
            {
                importer.WriteNull();
            }
            else
            {
                importer.Write(row.Key, NpgsqlDbType.Text);
            }

            importer.Write(row.Eta, NpgsqlDbType.Double);
            importer.Write(row.Probability, NpgsqlDbType.Double);
            importer.Write(row.FeaturesJson, NpgsqlDbType.Text);
            if (row.LiveId is { } live)
            {
                importer.Write(live, NpgsqlDbType.Uuid);
            }
            else
            {
                importer.WriteNull();
            }
        }

        await importer.CompleteAsync(cancellationToken).ConfigureAwait(false);
    }

    /// <summary>The batch's rows counted by (model, version, minute), in ordinal order of the key, as four arrays.</summary>
    public static (string[] Models, string[] Versions, long[] Minutes, long[] Counts) CountMinutes(IReadOnlyList<PredictionRecord> batch)
    {
        var counts = new Dictionary<(string Model, string Version, long Minute), long>();
        foreach (var row in batch)
        {
            var key = (row.Model, row.Version, StoreTime.Minute(row.ScoredAt));
            counts[key] = counts.GetValueOrDefault(key) + 1;
        }

        var sorted = counts
            .OrderBy(c => c.Key.Model, StringComparer.Ordinal)
            .ThenBy(c => c.Key.Version, StringComparer.Ordinal)
            .ThenBy(c => c.Key.Minute)
            .ToArray();
        return (
            [.. sorted.Select(c => c.Key.Model)],
            [.. sorted.Select(c => c.Key.Version)],
            [.. sorted.Select(c => c.Key.Minute)],
            [.. sorted.Select(c => c.Value)]);
    }
}
