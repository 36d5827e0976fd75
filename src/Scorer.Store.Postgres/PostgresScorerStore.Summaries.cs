using Npgsql;
using NpgsqlTypes;

namespace Scorer.Store.Postgres;

/// <summary>The monitor's labelled summaries (<see cref="ISummaryStore"/>): one row per version, segment and bucket.</summary>
public sealed partial class PostgresScorerStore
{
    /// <inheritdoc />
    public async Task<SummaryState?> GetSummaryStateAsync(string model, string version, CancellationToken cancellationToken = default)
    {
        ArgumentException.ThrowIfNullOrEmpty(model);
        ArgumentException.ThrowIfNullOrEmpty(version);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        await using var command = Command(connection, null, "SELECT cursor, revision FROM summary_states WHERE model = $1 AND version = $2");
        command.Parameters.Add(Text(model));
        command.Parameters.Add(Text(version));
        await using var reader = await command.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
        return await reader.ReadAsync(cancellationToken).ConfigureAwait(false) ? new SummaryState(reader.GetInt64(0), reader.GetInt64(1)) : null;
    }

    /// <inheritdoc />
    public async Task<IReadOnlyList<StoredSummary>> GetSummariesAsync(string model, string version, long afterRevision, CancellationToken cancellationToken = default)
    {
        ArgumentException.ThrowIfNullOrEmpty(model);
        ArgumentException.ThrowIfNullOrEmpty(version);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        await using var command = Command(connection, null,
            "SELECT segment, bucket_start, bucket_seconds, revision, CASE WHEN revision > $3 THEN summary ELSE '\\x'::bytea END FROM labelled_summaries "
            + "WHERE model = $1 AND version = $2 ORDER BY segment, bucket_start");
        command.Parameters.Add(Text(model));
        command.Parameters.Add(Text(version));
        command.Parameters.Add(Bigint(afterRevision));
        var summaries = new List<StoredSummary>();
        await using var reader = await command.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
        while (await reader.ReadAsync(cancellationToken).ConfigureAwait(false))
        {
            summaries.Add(new StoredSummary(reader.GetString(0), PostgresValues.FromTimestamp(reader.GetDateTime(1)), TimeSpan.FromSeconds(reader.GetInt32(2)),
                reader.GetFieldValue<byte[]>(4), reader.GetInt64(3)));
        }

        return summaries;
    }

    /// <inheritdoc />
    /// <remarks>Written on the lease's own session (the one holding the advisory lock), in one transaction.</remarks>
    public async Task SaveSummariesAsync(string model, string version, long cursor, long revision, IReadOnlyList<StoredSummary> upserts,
        IReadOnlyList<(string Segment, DateTimeOffset Start)> deletes, string lease, CancellationToken cancellationToken = default)
    {
        ArgumentException.ThrowIfNullOrEmpty(model);
        ArgumentException.ThrowIfNullOrEmpty(version);
        ArgumentNullException.ThrowIfNull(upserts);
        ArgumentNullException.ThrowIfNull(deletes);
        ArgumentException.ThrowIfNullOrEmpty(lease);
        ObjectDisposedException.ThrowIf(_disposed, this);
        await _leaseGate.WaitAsync(cancellationToken).ConfigureAwait(false);
        try
        {
            if (!_leases.TryGetValue(lease, out var held))
            {
                throw new LeaseLostException(lease);
            }

            try
            {
                await using var transaction = await held.BeginTransactionAsync(cancellationToken).ConfigureAwait(false);
                var batch = new NpgsqlBatch(held, transaction);
                await using (batch.ConfigureAwait(false))
                {
                    if (deletes.Count > 0)
                    {
                        var delete = new NpgsqlBatchCommand(
                            "DELETE FROM labelled_summaries s USING unnest($3::text[], $4::timestamptz[]) AS d(segment, bucket_start) "
                            + "WHERE s.model = $1 AND s.version = $2 AND s.segment = d.segment AND s.bucket_start = d.bucket_start");
                        delete.Parameters.Add(Text(model));
                        delete.Parameters.Add(Text(version));
                        delete.Parameters.Add(TextArray([.. deletes.Select(d => d.Segment)]));
                        delete.Parameters.Add(new NpgsqlParameter<DateTime[]>
                        {
                            TypedValue = [.. deletes.Select(d => PostgresValues.ToTimestamp(d.Start))],
                            NpgsqlDbType = NpgsqlDbType.Array | NpgsqlDbType.TimestampTz,
                        });
                        batch.BatchCommands.Add(delete);
                    }

                    foreach (var bucket in upserts)
                    {
                        var upsert = new NpgsqlBatchCommand(
                            "INSERT INTO labelled_summaries (model, version, segment, bucket_start, bucket_seconds, revision, summary) VALUES ($1, $2, $3, $4, $5, $6, $7) "
                            + "ON CONFLICT (model, version, segment, bucket_start) DO UPDATE SET bucket_seconds = excluded.bucket_seconds, "
                            + "revision = excluded.revision, summary = excluded.summary");
                        upsert.Parameters.Add(Text(model));
                        upsert.Parameters.Add(Text(version));
                        upsert.Parameters.Add(Text(bucket.Segment));
                        upsert.Parameters.Add(Timestamp(bucket.Start));
                        upsert.Parameters.Add(new NpgsqlParameter<int> { TypedValue = checked((int)bucket.Length.TotalSeconds), NpgsqlDbType = NpgsqlDbType.Integer });
                        upsert.Parameters.Add(Bigint(revision));
                        upsert.Parameters.Add(new NpgsqlParameter<byte[]> { TypedValue = bucket.Summary, NpgsqlDbType = NpgsqlDbType.Bytea });
                        batch.BatchCommands.Add(upsert);
                    }

                    var state = new NpgsqlBatchCommand(
                        "INSERT INTO summary_states (model, version, cursor, revision, saved_at) VALUES ($1, $2, $3, $4, $5) "
                        + "ON CONFLICT (model, version) DO UPDATE SET cursor = excluded.cursor, revision = excluded.revision, saved_at = excluded.saved_at");
                    state.Parameters.Add(Text(model));
                    state.Parameters.Add(Text(version));
                    state.Parameters.Add(Bigint(cursor));
                    state.Parameters.Add(Bigint(revision));
                    state.Parameters.Add(Timestamp(_clock.GetUtcNow()));
                    batch.BatchCommands.Add(state);
                    await batch.ExecuteNonQueryAsync(cancellationToken).ConfigureAwait(false);
                }

                await transaction.CommitAsync(cancellationToken).ConfigureAwait(false);
            }
            catch (NpgsqlException) when (held.FullState.HasFlag(System.Data.ConnectionState.Broken) || held.State != System.Data.ConnectionState.Open)
            {
                _leases.Remove(lease);
                await held.DisposeAsync().ConfigureAwait(false);
                throw new LeaseLostException(lease);
            }
        }
        finally
        {
            _leaseGate.Release();
        }
    }
}
