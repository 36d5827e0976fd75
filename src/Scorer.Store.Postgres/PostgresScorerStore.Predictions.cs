using System.Globalization;
using Npgsql;
using NpgsqlTypes;

namespace Scorer.Store.Postgres;

/// <summary>The prediction log: batches written by binary COPY, read back, counted.</summary>
public sealed partial class PostgresScorerStore
{
    /// <inheritdoc />
    /// <remarks>
    /// One transaction: a shared hold on the log's advisory lock (see <see cref="RecordImplicitNegativesAsync"/>), the
    /// per-minute counts upserted, then the rows by binary COPY. A repeated or stored id makes PostgreSQL refuse the
    /// COPY (unique violation); the transaction is rolled back and the id is looked up to name it.
    /// </remarks>
    public async Task WritePredictionsAsync(IReadOnlyList<PredictionRecord> batch, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(batch);
        if (batch.Count == 0)
        {
            return;
        }

        if (batch.Count > RowsPerBatchNumber)
        {
            throw new ArgumentException($"The batch holds {batch.Count:N0} predictions; at most {RowsPerBatchNumber:N0} are written at once.", nameof(batch));
        }

        // Checked before anything is written, so a bad row costs the batch nothing but the call.
        var seen = new HashSet<Guid>(batch.Count);
        var repeated = false;
        for (var i = 0; i < batch.Count; i++)
        {
            CheckPrediction(batch[i], i);
            repeated |= !seen.Add(batch[i].Id);
        }

        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        if (repeated)
        {
            throw await DuplicateIdErrorAsync(connection, batch, null, cancellationToken).ConfigureAwait(false);
        }

        var (models, versions, minutes, counts) = PredictionCopy.CountMinutes(batch);
        await using var transaction = await connection.BeginTransactionAsync(cancellationToken).ConfigureAwait(false);
        try
        {
            long batchNumber;
            var prelude = new NpgsqlBatch(connection, transaction);
            await using (prelude.ConfigureAwait(false))
            {
                // The lock before the batch number: the sweep's horizon then covers every number taken (see the sweep).
                prelude.BatchCommands.Add(new NpgsqlBatchCommand($"SELECT pg_advisory_xact_lock_shared({LogLockKey})"));
                prelude.BatchCommands.Add(new NpgsqlBatchCommand("SELECT nextval('prediction_batches')"));
                var odd = batch.Where(r => !IdTimes.Carries(r.Id, r.ScoredAt)).ToArray();
                if (odd.Length > 0)
                {
                    // A row whose id does not carry its time is not refused by a partition's key (id, scored_at) when its
                    // id is stored with another time: it is looked for where its id would be found.
                    var windows = odd.Select(r => IdTimes.Window(r.Id)).ToArray();
                    var stored = new NpgsqlBatchCommand(
                        "SELECT count(*) FROM unnest($1::uuid[], $2::timestamptz[], $3::timestamptz[]) AS u(id, from_at, to_at) "
                        + "JOIN predictions p ON p.id = u.id AND p.scored_at >= u.from_at AND p.scored_at < u.to_at");
                    stored.Parameters.Add(new NpgsqlParameter<Guid[]> { TypedValue = [.. odd.Select(r => r.Id)], NpgsqlDbType = NpgsqlDbType.Array | NpgsqlDbType.Uuid });
                    stored.Parameters.Add(new NpgsqlParameter<DateTime?[]> { TypedValue = [.. windows.Select(w => w.From)], NpgsqlDbType = NpgsqlDbType.Array | NpgsqlDbType.TimestampTz });
                    stored.Parameters.Add(new NpgsqlParameter<DateTime?[]> { TypedValue = [.. windows.Select(w => w.To)], NpgsqlDbType = NpgsqlDbType.Array | NpgsqlDbType.TimestampTz });
                    prelude.BatchCommands.Add(stored);
                }

                var minuteCounts = new NpgsqlBatchCommand(PredictionCopy.MinuteSql);
                minuteCounts.Parameters.Add(TextArray(models));
                minuteCounts.Parameters.Add(TextArray(versions));
                minuteCounts.Parameters.Add(new NpgsqlParameter<long[]> { TypedValue = minutes, NpgsqlDbType = NpgsqlDbType.Array | NpgsqlDbType.Bigint });
                minuteCounts.Parameters.Add(new NpgsqlParameter<long[]> { TypedValue = counts, NpgsqlDbType = NpgsqlDbType.Array | NpgsqlDbType.Bigint });
                prelude.BatchCommands.Add(minuteCounts);
                if (odd.Length > 0)
                {
                    // Rows a lookup cannot find from their id alone (migration 0007); none when every id carries its time.
                    var times = new NpgsqlBatchCommand("INSERT INTO prediction_times (id, scored_at) SELECT * FROM unnest($1::uuid[], $2::timestamptz[])");
                    times.Parameters.Add(new NpgsqlParameter<Guid[]> { TypedValue = [.. odd.Select(r => r.Id)], NpgsqlDbType = NpgsqlDbType.Array | NpgsqlDbType.Uuid });
                    times.Parameters.Add(new NpgsqlParameter<DateTime[]>
                    {
                        TypedValue = [.. odd.Select(r => PostgresValues.ToTimestamp(r.ScoredAt))], NpgsqlDbType = NpgsqlDbType.Array | NpgsqlDbType.TimestampTz,
                    });
                    prelude.BatchCommands.Add(times);
                }

                var storedAlready = false;
                await using (var reader = await prelude.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false))
                {
                    await reader.NextResultAsync(cancellationToken).ConfigureAwait(false);
                    await reader.ReadAsync(cancellationToken).ConfigureAwait(false);
                    batchNumber = reader.GetInt64(0);
                    if (odd.Length > 0)
                    {
                        await reader.NextResultAsync(cancellationToken).ConfigureAwait(false);
                        await reader.ReadAsync(cancellationToken).ConfigureAwait(false);
                        storedAlready = reader.GetInt64(0) > 0;
                    }
                }

                if (storedAlready)
                {
                    await transaction.RollbackAsync(CancellationToken.None).ConfigureAwait(false);
                    throw await DuplicateIdErrorAsync(connection, batch, null, cancellationToken).ConfigureAwait(false);
                }
            }

            await PredictionCopy.RunAsync(connection, batch, batchNumber * RowsPerBatchNumber, cancellationToken).ConfigureAwait(false);
            await transaction.CommitAsync(cancellationToken).ConfigureAwait(false);
        }
        catch (PostgresException ex) when (ex.SqlState == PostgresErrorCodes.UniqueViolation && IsPredictionKey(ex.ConstraintName))
        {
            await transaction.RollbackAsync(CancellationToken.None).ConfigureAwait(false);
            throw await DuplicateIdErrorAsync(connection, batch, ex, cancellationToken).ConfigureAwait(false);
        }
    }

    /// <summary>
    /// The constraints that refuse a stored id: each partition's primary key (predictions_YYYYMMDD_pkey,
    /// predictions_default_pkey) and prediction_times' for ids that do not carry their time.
    /// </summary>
    private static bool IsPredictionKey(string? constraint) =>
        constraint is not null && (constraint == "prediction_times_pkey"
            || (constraint.StartsWith("predictions_", StringComparison.Ordinal) && constraint.EndsWith("_pkey", StringComparison.Ordinal)));

    /// <summary>
    /// The error naming the first row of the batch that could not be written: the first whose id is already stored or
    /// repeats an earlier row's (the row a row-by-row insert would have stopped at).
    /// </summary>
    private static async Task<PredictionRefusedException> DuplicateIdErrorAsync(
        NpgsqlConnection connection, IReadOnlyList<PredictionRecord> batch, PostgresException? violation, CancellationToken cancellationToken)
    {
        var stored = new HashSet<Guid>();
        await using (var command = Command(connection, null, "SELECT id FROM predictions WHERE id = ANY($1)"))
        {
            command.Parameters.Add(new NpgsqlParameter<Guid[]> { TypedValue = [.. batch.Select(r => r.Id)], NpgsqlDbType = NpgsqlDbType.Array | NpgsqlDbType.Uuid });
            await using var reader = await command.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
            while (await reader.ReadAsync(cancellationToken).ConfigureAwait(false))
            {
                stored.Add(reader.GetGuid(0));
            }
        }

        var seen = new HashSet<Guid>(batch.Count);
        foreach (var row in batch)
        {
            if (stored.Contains(row.Id) || !seen.Add(row.Id))
            {
                return new PredictionRefusedException($"No prediction of the batch was written: id {row.Id} is repeated in the batch or already stored.", violation);
            }
        }

        // The clash was with a concurrent batch that has since rolled back; PostgreSQL's detail still names the key.
        return new PredictionRefusedException(
            $"No prediction of the batch was written: an id was being written by another batch at the same time ({violation?.Detail ?? violation?.MessageText}).",
            violation);
    }

    /// <inheritdoc />
    /// <remarks>
    /// Refusals: a row the contract checks refuse (<see cref="ArgumentException"/>), a repeated id (<see cref="PredictionRefusedException"/>), and the server's data exceptions (SQLSTATE class 22, e.g. 22021 for a
    /// U+0000 in text), integrity violations (class 23) and program limits (class 54, e.g. a row too large).
    /// </remarks>
    public bool IsRefusal(Exception error) => error switch
    {
        ArgumentException or PredictionRefusedException => true,
        PostgresException p => IsDataRefusal(p.SqlState),
        _ => false,
    };

    private static bool IsDataRefusal(string sqlState) =>
        sqlState.StartsWith("22", StringComparison.Ordinal) || sqlState.StartsWith("23", StringComparison.Ordinal) || sqlState.StartsWith("54", StringComparison.Ordinal);

    /// <inheritdoc />
    /// <remarks>
    /// Reads the partitions of the time the id carries (<see cref="IdTimes"/>), and prediction_times for an id that
    /// carries none: two index probes, whatever the number of partitions.
    /// </remarks>
    public async Task<PredictionRecord?> GetPredictionAsync(Guid id, CancellationToken cancellationToken = default)
    {
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        await using var command = Command(connection, null,
            $"SELECT {PredictionColumns} FROM predictions WHERE id = $1 AND scored_at >= $2 AND scored_at < $3 "
            + $"UNION ALL SELECT {string.Join(", ", PredictionColumns.Split(", ").Select(c => "p." + c))} FROM prediction_times t "
            + "JOIN predictions p ON p.id = t.id AND p.scored_at = t.scored_at WHERE t.id = $1 LIMIT 1");
        var (from, to) = IdTimes.Window(id);
        command.Parameters.Add(new NpgsqlParameter<Guid> { TypedValue = id, NpgsqlDbType = NpgsqlDbType.Uuid });
        command.Parameters.Add(new NpgsqlParameter<DateTime?> { TypedValue = from, NpgsqlDbType = NpgsqlDbType.TimestampTz });
        command.Parameters.Add(new NpgsqlParameter<DateTime?> { TypedValue = to, NpgsqlDbType = NpgsqlDbType.TimestampTz });
        await using var reader = await command.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
        return await reader.ReadAsync(cancellationToken).ConfigureAwait(false) ? ReadPrediction(reader) : null;
    }

    /// <inheritdoc />
    /// <remarks>Predictions scored at the same microsecond come in the order they were written.</remarks>
    public async Task<IReadOnlyList<PredictionRecord>> GetPredictionsAsync(
        string model, string? version, DateTimeOffset from, DateTimeOffset to, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(model);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        var versionFilter = version is null ? string.Empty : "AND version = $4 ";
        await using var command = Command(connection, null,
            $"SELECT {PredictionColumns} FROM predictions WHERE model = $1 {versionFilter}AND scored_at >= $2 AND scored_at < $3 ORDER BY scored_at, log_seq");
        command.Parameters.Add(Text(model));
        command.Parameters.Add(Timestamp(from));
        command.Parameters.Add(Timestamp(to));
        if (version is not null)
        {
            command.Parameters.Add(Text(version));
        }

        await using var reader = await command.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
        var predictions = new List<PredictionRecord>();
        while (await reader.ReadAsync(cancellationToken).ConfigureAwait(false))
        {
            predictions.Add(ReadPrediction(reader));
        }

        return predictions;
    }

    /// <inheritdoc />
    public async Task<long> CountPredictionsAsync(string model, string? version = null, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(model);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        await using var command = Command(connection, null,
            version is null
                ? "SELECT count(*) FROM predictions WHERE model = $1"
                : "SELECT count(*) FROM predictions WHERE model = $1 AND version = $2");
        command.Parameters.Add(Text(model));
        if (version is not null)
        {
            command.Parameters.Add(Text(version));
        }

        return Convert.ToInt64(await command.ExecuteScalarAsync(cancellationToken).ConfigureAwait(false), CultureInfo.InvariantCulture);
    }

    /// <inheritdoc />
    public async Task<long> CountPredictionsByMinuteAsync(string model, string version, DateTimeOffset from, DateTimeOffset to,
        CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentNullException.ThrowIfNull(version);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        await using var command = Command(connection, null,
            "SELECT coalesce(sum(predictions), 0)::bigint FROM prediction_minutes WHERE model = $1 AND version = $2 AND minute >= $3 AND minute < $4");
        command.Parameters.Add(Text(model));
        command.Parameters.Add(Text(version));
        command.Parameters.Add(Bigint(StoreTime.CeilingUnits(from, StoreTime.MicrosecondsPerMinute)));
        command.Parameters.Add(Bigint(StoreTime.CeilingUnits(to, StoreTime.MicrosecondsPerMinute)));
        return Convert.ToInt64(await command.ExecuteScalarAsync(cancellationToken).ConfigureAwait(false), CultureInfo.InvariantCulture);
    }

    private static void CheckPrediction(PredictionRecord? row, int index)
    {
        StoreRules.CheckPrediction(row, index);
        CheckText(row!.Model, "Model", index, row.Id);
        CheckText(row.Version, "Version", index, row.Id);
        CheckText(row.Key, "Key", index, row.Id);
        CheckText(row.FeaturesJson, "FeaturesJson", index, row.Id);
    }

    /// <summary>PostgreSQL text cannot hold U+0000; refused before anything is written, naming the field.</summary>
    private static void CheckText(string? value, string field, int index, Guid id)
    {
        if (value is not null && value.Contains('\0', StringComparison.Ordinal))
        {
            throw new ArgumentException($"batch[{index}] (id {id}) has a {field} holding the character U+0000, which PostgreSQL text cannot store.", "batch");
        }
    }

    private static PredictionRecord ReadPrediction(NpgsqlDataReader reader) => new(
        reader.GetGuid(0),
        reader.GetString(1),
        reader.GetString(2),
        PostgresValues.ToStage(reader.GetString(3)),
        PostgresValues.FromTimestamp(reader.GetDateTime(4)),
        reader.IsDBNull(5) ? null : reader.GetString(5),
        reader.GetDouble(6),
        reader.GetDouble(7),
        reader.GetString(8),
        reader.IsDBNull(9) ? null : reader.GetGuid(9));
}
