using Microsoft.Data.Sqlite;

namespace Scorer.Store.Sqlite;

/// <summary>Labelled predictions: by range, the change feed, the export's pages, live and shadow pairs.</summary>
public sealed partial class SqliteScorerStore
{
    /// <inheritdoc />
    public async Task<IReadOnlyList<PairedOutcome>> GetPairedAsync(string model, string liveVersion, string shadowVersion, DateTimeOffset from, DateTimeOffset to,
        int? latest = null, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(model);
        if (latest is < 1)
        {
            throw new ArgumentOutOfRangeException(nameof(latest), latest, "At least one pair.");
        }

        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        // The latest pairs: the live outcomes newest first along outcomes_by_model_time, each shadow outcome found by
        // outcomes_by_live_id, stopped at the limit; then put back in prediction-time order.
        using var command = Command(connection, null, latest is null
            ? "SELECT l.probability, s.probability, l.outcome FROM outcomes s JOIN outcomes l ON l.prediction_id = s.live_id "
              + "WHERE s.model = $model AND s.version = $shadow AND l.version = $live AND l.scored_at >= $from AND l.scored_at < $to "
              + "ORDER BY l.scored_at, l.prediction_id;"
            : "SELECT l.probability, s.probability, l.outcome FROM outcomes l CROSS JOIN outcomes s ON s.live_id = l.prediction_id "
              + "WHERE l.model = $model AND l.version = $live AND l.scored_at >= $from AND l.scored_at < $to AND s.version = $shadow "
              + "ORDER BY l.scored_at DESC, l.prediction_id DESC LIMIT $latest;");
        if (latest is { } n)
        {
            command.Parameters.AddWithValue("$latest", n);
        }

        command.Parameters.AddWithValue("$model", model);
        command.Parameters.AddWithValue("$live", liveVersion);
        command.Parameters.AddWithValue("$shadow", shadowVersion);
        command.Parameters.AddWithValue("$from", StoreTime.ToUnixMicroseconds(from));
        command.Parameters.AddWithValue("$to", StoreTime.ToUnixMicroseconds(to));
        using var reader = command.ExecuteReader();
        var pairs = new List<PairedOutcome>();
        while (reader.Read())
        {
            pairs.Add(new PairedOutcome(reader.GetDouble(0), reader.GetDouble(1), (byte)reader.GetInt64(2)));
        }

        if (latest is not null)
        {
            pairs.Reverse();
        }

        return pairs;
    }

    /// <inheritdoc />
    public async Task<IReadOnlyList<LabelledRow>> GetLabelledRowsAsync(string model, string? version, DateTimeOffset from, DateTimeOffset to,
        LabelledRowPosition? after, int limit, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentOutOfRangeException.ThrowIfLessThan(limit, 1);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        var versionFilter = version is null ? "" : "AND o.version = $version ";
        if (after is { } a && StoreTime.ToUnixMicroseconds(a.ScoredAt) < StoreTime.ToUnixMicroseconds(from))
        {
            after = null; // a position before the range: the range's start
        }

        // Each page is a range read of outcomes_by_model_time (model, scored_at, prediction_id) from its start, never a
        // sort. A later page starts at the position alone: with "scored_at >= from" beside it SQLite would start every
        // page at the range's start and filter, reading the export over and over.
        var start = after is null ? "AND o.scored_at >= $from " : "AND (o.scored_at, o.prediction_id) > ($afterAt, $afterId) ";
        using var command = Command(connection, null,
            "SELECT o.prediction_id, o.version, o.stage, o.scored_at, o.eta, o.probability, o.outcome, o.implicit, o.recorded_at, p.\"key\", p.features "
            + "FROM outcomes o JOIN predictions p ON p.id = o.prediction_id "
            + $"WHERE o.model = $model {versionFilter}{start}AND o.scored_at < $to "
            + "ORDER BY o.scored_at, o.prediction_id LIMIT $limit;");
        command.Parameters.AddWithValue("$model", model);
        if (version is not null)
        {
            command.Parameters.AddWithValue("$version", version);
        }

        command.Parameters.AddWithValue("$to", StoreTime.ToUnixMicroseconds(to));
        if (after is not { } position)
        {
            command.Parameters.AddWithValue("$from", StoreTime.ToUnixMicroseconds(from));
        }
        else
        {
            command.Parameters.AddWithValue("$afterAt", StoreTime.ToUnixMicroseconds(position.ScoredAt));
            command.Parameters.Add("$afterId", SqliteType.Blob).Value = StoredValues.ToBytes(position.Id);
        }

        command.Parameters.AddWithValue("$limit", limit);
        using var reader = command.ExecuteReader();
        var rows = new List<LabelledRow>(Math.Min(limit, 4096));
        while (reader.Read())
        {
            rows.Add(new LabelledRow(ReadLabelled(reader), reader.IsDBNull(9) ? null : reader.GetString(9), reader.GetString(10)));
        }

        return rows;
    }

    /// <inheritdoc />
    public async Task<IReadOnlyList<LabelledPrediction>> GetLabelledAsync(string model, string? version, DateTimeOffset from, DateTimeOffset to,
        CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(model);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        var versionFilter = version is null ? "" : "AND version = $version ";
        using var command = Command(connection, null,
            "SELECT prediction_id, version, stage, scored_at, eta, probability, outcome, implicit, recorded_at FROM outcomes "
            + $"WHERE model = $model {versionFilter}AND scored_at >= $from AND scored_at < $to ORDER BY scored_at, prediction_id;");
        command.Parameters.AddWithValue("$model", model);
        if (version is not null)
        {
            command.Parameters.AddWithValue("$version", version);
        }

        command.Parameters.AddWithValue("$from", StoreTime.ToUnixMicroseconds(from));
        command.Parameters.AddWithValue("$to", StoreTime.ToUnixMicroseconds(to));
        using var reader = command.ExecuteReader();
        var labelled = new List<LabelledPrediction>();
        while (reader.Read())
        {
            labelled.Add(ReadLabelled(reader));
        }

        return labelled;
    }

    /// <inheritdoc />
    public async Task<LabelledChanges> GetLabelledChangesAsync(string model, string version, long cursor, int? limit = null, CancellationToken cancellationToken = default)
    {
        ArgumentException.ThrowIfNullOrEmpty(model);
        ArgumentException.ThrowIfNullOrEmpty(version);
        ArgumentOutOfRangeException.ThrowIfNegative(cursor);
        if (limit is { } l)
        {
            ArgumentOutOfRangeException.ThrowIfLessThan(l, 1, nameof(limit));
        }

        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        // A page ends with the whole of the transaction that holds its limit-th change (one change number each).
        var page = limit is null ? "" : "AND change <= COALESCE((SELECT change FROM outcomes WHERE model = $model AND version = $version AND change > $cursor "
            + "ORDER BY change LIMIT 1 OFFSET $offset), change) ";
        using var command = Command(connection, null,
            $"SELECT prediction_id, scored_at, probability, outcome, change, revised FROM outcomes WHERE model = $model AND version = $version AND change > $cursor {page}ORDER BY change;");
        command.Parameters.AddWithValue("$model", model);
        command.Parameters.AddWithValue("$version", version);
        command.Parameters.AddWithValue("$cursor", cursor);
        if (limit is { } offset)
        {
            command.Parameters.AddWithValue("$offset", offset - 1);
        }

        var points = new List<LabelledPoint>();
        var last = cursor;
        using (var reader = command.ExecuteReader())
        {
            while (reader.Read())
            {
                cancellationToken.ThrowIfCancellationRequested();
                // GetFieldValue<byte[]>, not GetBytes: the driver's GetBytes opens a blob handle per call (measured 4.5 µs a row).
                points.Add(new LabelledPoint(StoredValues.ToGuid(reader.GetFieldValue<byte[]>(0)), StoreTime.FromUnixMicroseconds(reader.GetInt64(1)), reader.GetDouble(2),
                    (byte)reader.GetInt64(3), reader.GetInt64(5) == 1));
                last = reader.GetInt64(4);
            }
        }

        // Changes are numbered in commit order (NextChange), so every later commit carries a number above the last one read.
        return new LabelledChanges(points, last);
    }

    /// <inheritdoc />
    public async Task<IReadOnlyList<LabelledPoint>> GetLabelledUpToAsync(string model, string version, DateTimeOffset from, DateTimeOffset to, long cursor,
        CancellationToken cancellationToken = default)
    {
        ArgumentException.ThrowIfNullOrEmpty(model);
        ArgumentException.ThrowIfNullOrEmpty(version);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        using var command = Command(connection, null,
            "SELECT prediction_id, scored_at, probability, outcome, revised FROM outcomes WHERE model = $model AND version = $version "
            + "AND scored_at >= $from AND scored_at < $to AND change <= $cursor;");
        command.Parameters.AddWithValue("$model", model);
        command.Parameters.AddWithValue("$version", version);
        command.Parameters.AddWithValue("$from", StoreTime.ToUnixMicroseconds(from));
        command.Parameters.AddWithValue("$to", StoreTime.ToUnixMicroseconds(to));
        command.Parameters.AddWithValue("$cursor", cursor);
        var points = new List<LabelledPoint>();
        using var reader = command.ExecuteReader();
        while (reader.Read())
        {
            cancellationToken.ThrowIfCancellationRequested();
            points.Add(new LabelledPoint(StoredValues.ToGuid(reader.GetFieldValue<byte[]>(0)), StoreTime.FromUnixMicroseconds(reader.GetInt64(1)), reader.GetDouble(2),
                (byte)reader.GetInt64(3), reader.GetInt64(4) == 1));
        }

        return points;
    }

    /// <summary>A labelled prediction from the columns prediction_id, version, stage, scored_at, eta, probability, outcome, implicit, recorded_at.</summary>
    private static LabelledPrediction ReadLabelled(SqliteDataReader reader) => new(
        StoredValues.ToGuid(reader.GetFieldValue<byte[]>(0)),
        reader.GetString(1),
        StoredValues.ToStage(reader.GetString(2)),
        StoreTime.FromUnixMicroseconds(reader.GetInt64(3)),
        reader.GetDouble(4),
        reader.GetDouble(5),
        (byte)reader.GetInt64(6),
        reader.GetInt64(7) == 1,
        StoreTime.FromUnixMicroseconds(reader.GetInt64(8)));
}
