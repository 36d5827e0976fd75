using System.Globalization;
using Npgsql;
using NpgsqlTypes;

namespace Scorer.Store.Postgres;

/// <summary>Labelled predictions: by range, the change feed, the export's pages, live and shadow pairs.</summary>
public sealed partial class PostgresScorerStore
{
    /// <inheritdoc />
    public async Task<IReadOnlyList<PairedOutcome>> GetPairedAsync(string model, string liveVersion, string shadowVersion, DateTimeOffset from, DateTimeOffset to,
        int? latest = null, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentNullException.ThrowIfNull(liveVersion);
        ArgumentNullException.ThrowIfNull(shadowVersion);
        if (latest is < 1)
        {
            throw new ArgumentOutOfRangeException(nameof(latest), latest, "At least one pair.");
        }

        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        // The latest pairs: the live outcomes newest first, each shadow outcome found by outcomes_by_live_id, stopped at
        // the limit; then put back in prediction-time order.
        await using var command = Command(connection, null, latest is null
            ? "SELECT l.probability, s.probability, l.outcome FROM outcomes s JOIN outcomes l ON l.prediction_id = s.live_id "
              + "WHERE s.model = $1 AND s.version = $3 AND l.version = $2 AND l.scored_at >= $4 AND l.scored_at < $5 "
              + "ORDER BY l.scored_at, l.prediction_id"
            : "SELECT l.probability, s.probability, l.outcome FROM outcomes l JOIN outcomes s ON s.live_id = l.prediction_id "
              + "WHERE l.model = $1 AND l.version = $2 AND l.scored_at >= $4 AND l.scored_at < $5 AND s.version = $3 "
              + "ORDER BY l.scored_at DESC, l.prediction_id DESC LIMIT $6");
        command.Parameters.Add(Text(model));
        command.Parameters.Add(Text(liveVersion));
        command.Parameters.Add(Text(shadowVersion));
        command.Parameters.Add(Timestamp(from));
        command.Parameters.Add(Timestamp(to));
        if (latest is { } n)
        {
            command.Parameters.Add(new Npgsql.NpgsqlParameter { Value = n, NpgsqlDbType = NpgsqlTypes.NpgsqlDbType.Integer });
        }

        await using var reader = await command.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
        var pairs = new List<PairedOutcome>();
        while (await reader.ReadAsync(cancellationToken).ConfigureAwait(false))
        {
            pairs.Add(new PairedOutcome(reader.GetDouble(0), reader.GetDouble(1), (byte)reader.GetInt16(2)));
        }

        if (latest is not null)
        {
            pairs.Reverse();
        }

        return pairs;
    }

    /// <inheritdoc />
    /// <remarks>Npgsql reads the rows as the server sends them, so an export of any size holds one row in memory at a time.</remarks>
    public async Task<IReadOnlyList<LabelledRow>> GetLabelledRowsAsync(string model, string? version, DateTimeOffset from, DateTimeOffset to,
        LabelledRowPosition? after, int limit, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentOutOfRangeException.ThrowIfLessThan(limit, 1);
        if (after is { } a && PostgresValues.ToTimestamp(a.ScoredAt) < PostgresValues.ToTimestamp(from))
        {
            after = null; // a position before the range: the range's start
        }

        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        // Each page is a range read of outcomes_by_model_time (model, scored_at, prediction_id) from its start, never a
        // sort; a later page starts at the position alone (beside "scored_at >= from" the range would start at from).
        var start = after is null ? "o.scored_at >= $4" : "(o.scored_at, o.prediction_id) > ($4, $5)";
        var versionFilter = version is null ? "" : $" AND o.version = ${(after is null ? 5 : 6)}";
        await using var command = Command(connection, null,
            "SELECT o.prediction_id, o.version, o.stage, o.scored_at, o.eta, o.probability, o.outcome, o.implicit, o.recorded_at, p.\"key\", p.features "
            + "FROM outcomes o JOIN predictions p ON p.id = o.prediction_id AND p.scored_at = o.scored_at "
            + $"WHERE o.model = $1 AND {start} AND o.scored_at < $2{versionFilter} ORDER BY o.scored_at, o.prediction_id LIMIT $3");
        command.Parameters.Add(Text(model));
        command.Parameters.Add(Timestamp(to));
        command.Parameters.Add(new NpgsqlParameter<int> { TypedValue = limit, NpgsqlDbType = NpgsqlDbType.Integer });
        if (after is not { } position)
        {
            command.Parameters.Add(Timestamp(from));
        }
        else
        {
            command.Parameters.Add(Timestamp(position.ScoredAt));
            command.Parameters.Add(new NpgsqlParameter<Guid> { TypedValue = position.Id, NpgsqlDbType = NpgsqlDbType.Uuid });
        }

        if (version is not null)
        {
            command.Parameters.Add(Text(version));
        }

        await using var reader = await command.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
        var rows = new List<LabelledRow>(Math.Min(limit, 4096));
        while (await reader.ReadAsync(cancellationToken).ConfigureAwait(false))
        {
            rows.Add(new LabelledRow(ReadLabelled(reader), reader.IsDBNull(9) ? null : reader.GetString(9), reader.GetString(10)));
        }

        return rows;
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
        var read = new NpgsqlBatch(connection);
        await using (read.ConfigureAwait(false))
        {
            // No explicit transaction: the batch is one implicit transaction, and the lock lasts until it ends.
            read.BatchCommands.Add(OutcomeLock(model, shared: true));
            // A page ends with the whole of the transaction that holds its limit-th change (one xid each).
            var page = limit is null ? "" : "AND change <= COALESCE((SELECT change FROM outcomes WHERE model = $1 AND version = $2 AND change >= $3::text::xid8 "
                + "ORDER BY change OFFSET $4 LIMIT 1), change) ";
            var changes = new NpgsqlBatchCommand(
                "SELECT prediction_id, scored_at, probability, outcome, change::text::bigint, revised FROM outcomes "
                + $"WHERE model = $1 AND version = $2 AND change >= $3::text::xid8 {page}ORDER BY change");
            changes.Parameters.Add(Text(model));
            changes.Parameters.Add(Text(version));
            changes.Parameters.Add(Text(cursor.ToString(CultureInfo.InvariantCulture)));
            if (limit is { } offset)
            {
                changes.Parameters.Add(Bigint(offset - 1));
            }

            read.BatchCommands.Add(changes);
            var points = new List<LabelledPoint>();
            var next = cursor;
            await using var reader = await read.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
            await reader.NextResultAsync(cancellationToken).ConfigureAwait(false);
            while (await reader.ReadAsync(cancellationToken).ConfigureAwait(false))
            {
                points.Add(new LabelledPoint(reader.GetGuid(0), PostgresValues.FromTimestamp(reader.GetDateTime(1)), reader.GetDouble(2), (byte)reader.GetInt16(3),
                    reader.GetBoolean(5)));
                next = reader.GetInt64(4) + 1;
            }

            return new LabelledChanges(points, next);
        }
    }

    /// <inheritdoc />
    public async Task<IReadOnlyList<LabelledPoint>> GetLabelledUpToAsync(string model, string version, DateTimeOffset from, DateTimeOffset to, long cursor,
        CancellationToken cancellationToken = default)
    {
        ArgumentException.ThrowIfNullOrEmpty(model);
        ArgumentException.ThrowIfNullOrEmpty(version);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        await using var command = Command(connection, null,
            "SELECT prediction_id, scored_at, probability, outcome, revised FROM outcomes "
            + "WHERE model = $1 AND version = $2 AND scored_at >= $3 AND scored_at < $4 AND change < $5::text::xid8");
        command.Parameters.Add(Text(model));
        command.Parameters.Add(Text(version));
        command.Parameters.Add(Timestamp(from));
        command.Parameters.Add(Timestamp(to));
        command.Parameters.Add(Text(cursor.ToString(CultureInfo.InvariantCulture)));
        var points = new List<LabelledPoint>();
        await using var reader = await command.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
        while (await reader.ReadAsync(cancellationToken).ConfigureAwait(false))
        {
            points.Add(new LabelledPoint(reader.GetGuid(0), PostgresValues.FromTimestamp(reader.GetDateTime(1)), reader.GetDouble(2), (byte)reader.GetInt16(3),
                reader.GetBoolean(4)));
        }

        return points;
    }

    /// <inheritdoc />
    public async Task<IReadOnlyList<LabelledPrediction>> GetLabelledAsync(string model, string? version, DateTimeOffset from, DateTimeOffset to,
        CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(model);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        var versionFilter = version is null ? "" : "AND version = $4 ";
        await using var command = Command(connection, null,
            "SELECT prediction_id, version, stage, scored_at, eta, probability, outcome, implicit, recorded_at FROM outcomes "
            + $"WHERE model = $1 {versionFilter}AND scored_at >= $2 AND scored_at < $3 ORDER BY scored_at, prediction_id");
        command.Parameters.Add(Text(model));
        command.Parameters.Add(Timestamp(from));
        command.Parameters.Add(Timestamp(to));
        if (version is not null)
        {
            command.Parameters.Add(Text(version));
        }

        await using var reader = await command.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
        var labelled = new List<LabelledPrediction>();
        while (await reader.ReadAsync(cancellationToken).ConfigureAwait(false))
        {
            labelled.Add(ReadLabelled(reader));
        }

        return labelled;
    }

    /// <summary>A labelled prediction from the columns prediction_id, version, stage, scored_at, eta, probability, outcome, implicit, recorded_at.</summary>
    private static LabelledPrediction ReadLabelled(NpgsqlDataReader reader) => new(
        reader.GetGuid(0),
        reader.GetString(1),
        PostgresValues.ToStage(reader.GetString(2)),
        PostgresValues.FromTimestamp(reader.GetDateTime(3)),
        reader.GetDouble(4),
        reader.GetDouble(5),
        (byte)reader.GetInt16(6),
        reader.GetBoolean(7),
        PostgresValues.FromTimestamp(reader.GetDateTime(8)));
}
