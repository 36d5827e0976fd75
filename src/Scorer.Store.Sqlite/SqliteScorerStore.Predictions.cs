using System.Globalization;
using Microsoft.Data.Sqlite;

namespace Scorer.Store.Sqlite;

/// <summary>The prediction log: batches by prepared inserts, read back, counted.</summary>
public sealed partial class SqliteScorerStore
{
    /// <inheritdoc />
    public Task WritePredictionsAsync(IReadOnlyList<PredictionRecord> batch, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(batch);
        if (batch.Count == 0)
        {
            return Task.CompletedTask;
        }

        // Checked before anything is written, so a bad row costs the batch nothing but the call.
        for (var i = 0; i < batch.Count; i++)
        {
            StoreRules.CheckPrediction(batch[i], i);
        }

        return WriteAsync(
            (connection, _) =>
            {
                PredictionBatchInsert.Run(connection, batch, cancellationToken);
                return true;
            },
            cancellationToken);
    }

    /// <inheritdoc />
    /// <remarks>
    /// Refusals: a row the contract checks refuse (<see cref="ArgumentException"/>), a repeated id
    /// (<see cref="PredictionRefusedException"/>), and SQLite's constraint (19, e.g.
    /// a repeated id), too-big (18), mismatch (20) and range (25) errors.
    /// </remarks>
    public bool IsRefusal(Exception error) => error switch
    {
        ArgumentException or PredictionRefusedException => true,
        SqliteException { SqliteErrorCode: 18 or 19 or 20 or 25 } => true,
        _ => false,
    };

    /// <inheritdoc />
    public async Task<PredictionRecord?> GetPredictionAsync(Guid id, CancellationToken cancellationToken = default)
    {
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        using var command = Command(connection, null, $"SELECT {PredictionColumns} FROM predictions WHERE id = $id;");
        command.Parameters.Add("$id", SqliteType.Blob).Value = StoredValues.ToBytes(id);
        using var reader = command.ExecuteReader();
        return reader.Read() ? ReadPrediction(reader) : null;
    }

    /// <inheritdoc />
    /// <remarks>Predictions scored at the same microsecond come in the order they were written.</remarks>
    public async Task<IReadOnlyList<PredictionRecord>> GetPredictionsAsync(
        string model, string? version, DateTimeOffset from, DateTimeOffset to, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(model);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        var versionFilter = version is null ? string.Empty : "AND version = $version ";
        using var command = Command(
            connection,
            null,
            $"SELECT {PredictionColumns} FROM predictions WHERE model = $model {versionFilter}AND scored_at >= $from AND scored_at < $to ORDER BY scored_at, rowid;");
        command.Parameters.AddWithValue("$model", model);
        if (version is not null)
        {
            command.Parameters.AddWithValue("$version", version);
        }

        command.Parameters.AddWithValue("$from", StoreTime.ToUnixMicroseconds(from));
        command.Parameters.AddWithValue("$to", StoreTime.ToUnixMicroseconds(to));
        using var reader = command.ExecuteReader();
        var predictions = new List<PredictionRecord>();
        while (reader.Read())
        {
            cancellationToken.ThrowIfCancellationRequested();
            predictions.Add(ReadPrediction(reader));
        }

        return predictions;
    }

    /// <inheritdoc />
    public async Task<long> CountPredictionsAsync(string model, string? version = null, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(model);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        using var command = Command(
            connection,
            null,
            version is null
                ? "SELECT count(*) FROM predictions WHERE model = $model;"
                : "SELECT count(*) FROM predictions WHERE model = $model AND version = $version;");
        command.Parameters.AddWithValue("$model", model);
        if (version is not null)
        {
            command.Parameters.AddWithValue("$version", version);
        }

        return Convert.ToInt64(command.ExecuteScalar(), CultureInfo.InvariantCulture);
    }

    /// <inheritdoc />
    public async Task<long> CountPredictionsByMinuteAsync(string model, string version, DateTimeOffset from, DateTimeOffset to, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentNullException.ThrowIfNull(version);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        using var command = Command(connection, null,
            "SELECT coalesce(sum(predictions), 0) FROM prediction_minutes WHERE model = $model AND version = $version AND minute >= $from AND minute < $to;");
        command.Parameters.AddWithValue("$model", model);
        command.Parameters.AddWithValue("$version", version);
        command.Parameters.AddWithValue("$from", StoreTime.CeilingUnits(from, StoreTime.MicrosecondsPerMinute));
        command.Parameters.AddWithValue("$to", StoreTime.CeilingUnits(to, StoreTime.MicrosecondsPerMinute));
        return Convert.ToInt64(command.ExecuteScalar(), CultureInfo.InvariantCulture);
    }

    private static PredictionRecord ReadPrediction(SqliteDataReader reader) => new(
        StoredValues.ToGuid(reader.GetFieldValue<byte[]>(0)),
        reader.GetString(1),
        reader.GetString(2),
        StoredValues.ToStage(reader.GetString(3)),
        StoreTime.FromUnixMicroseconds(reader.GetInt64(4)),
        reader.IsDBNull(5) ? null : reader.GetString(5),
        reader.GetDouble(6),
        reader.GetDouble(7),
        reader.GetString(8),
        reader.IsDBNull(9) ? null : StoredValues.ToGuid(reader.GetFieldValue<byte[]>(9)));
}
