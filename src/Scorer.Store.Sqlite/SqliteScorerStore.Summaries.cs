namespace Scorer.Store.Sqlite;

/// <summary>The monitor's labelled summaries (<see cref="ISummaryStore"/>): one row per version, segment and bucket.</summary>
public sealed partial class SqliteScorerStore
{
    /// <inheritdoc />
    public async Task<SummaryState?> GetSummaryStateAsync(string model, string version, CancellationToken cancellationToken = default)
    {
        ArgumentException.ThrowIfNullOrEmpty(model);
        ArgumentException.ThrowIfNullOrEmpty(version);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        using var command = Command(connection, null, "SELECT cursor, revision FROM summary_states WHERE model = $model AND version = $version;");
        command.Parameters.AddWithValue("$model", model);
        command.Parameters.AddWithValue("$version", version);
        using var reader = command.ExecuteReader();
        return reader.Read() ? new SummaryState(reader.GetInt64(0), reader.GetInt64(1)) : null;
    }

    /// <inheritdoc />
    public async Task<IReadOnlyList<StoredSummary>> GetSummariesAsync(string model, string version, long afterRevision, CancellationToken cancellationToken = default)
    {
        ArgumentException.ThrowIfNullOrEmpty(model);
        ArgumentException.ThrowIfNullOrEmpty(version);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        using var command = Command(connection, null,
            "SELECT segment, bucket_start, bucket_seconds, revision, CASE WHEN revision > $after THEN summary ELSE x'' END FROM labelled_summaries "
            + "WHERE model = $model AND version = $version ORDER BY segment, bucket_start;");
        command.Parameters.AddWithValue("$model", model);
        command.Parameters.AddWithValue("$version", version);
        command.Parameters.AddWithValue("$after", afterRevision);
        var summaries = new List<StoredSummary>();
        using var reader = command.ExecuteReader();
        while (reader.Read())
        {
            cancellationToken.ThrowIfCancellationRequested();
            summaries.Add(new StoredSummary(reader.GetString(0), DateTimeOffset.FromUnixTimeSeconds(reader.GetInt64(1)), TimeSpan.FromSeconds(reader.GetInt64(2)),
                reader.GetFieldValue<byte[]>(4), reader.GetInt64(3)));
        }

        return summaries;
    }

    /// <inheritdoc />
    public Task SaveSummariesAsync(string model, string version, long cursor, long revision, IReadOnlyList<StoredSummary> upserts,
        IReadOnlyList<(string Segment, DateTimeOffset Start)> deletes, string lease, CancellationToken cancellationToken = default)
    {
        ArgumentException.ThrowIfNullOrEmpty(model);
        ArgumentException.ThrowIfNullOrEmpty(version);
        ArgumentNullException.ThrowIfNull(upserts);
        ArgumentNullException.ThrowIfNull(deletes);
        ArgumentException.ThrowIfNullOrEmpty(lease);
        ObjectDisposedException.ThrowIf(_disposed, this);
        var now = StoreTime.ToUnixMicroseconds(_clock.GetUtcNow());
        return WriteAsync(
            (connection, transaction) =>
            {
                RenewOrThrow(connection, transaction, lease, now);

                using (var delete = Command(connection, transaction,
                    "DELETE FROM labelled_summaries WHERE model = $model AND version = $version AND segment = $segment AND bucket_start = $start;"))
                {
                    var segment = delete.Parameters.Add("$segment", Microsoft.Data.Sqlite.SqliteType.Text);
                    var start = delete.Parameters.Add("$start", Microsoft.Data.Sqlite.SqliteType.Integer);
                    delete.Parameters.AddWithValue("$model", model);
                    delete.Parameters.AddWithValue("$version", version);
                    foreach (var gone in deletes)
                    {
                        segment.Value = gone.Segment;
                        start.Value = gone.Start.ToUnixTimeSeconds();
                        delete.ExecuteNonQuery();
                    }
                }

                using (var upsert = Command(connection, transaction,
                    "INSERT INTO labelled_summaries (model, version, segment, bucket_start, bucket_seconds, revision, summary) "
                    + "VALUES ($model, $version, $segment, $start, $seconds, $revision, $summary) "
                    + "ON CONFLICT (model, version, segment, bucket_start) DO UPDATE SET bucket_seconds = excluded.bucket_seconds, "
                    + "revision = excluded.revision, summary = excluded.summary;"))
                {
                    upsert.Parameters.AddWithValue("$model", model);
                    upsert.Parameters.AddWithValue("$version", version);
                    upsert.Parameters.AddWithValue("$revision", revision);
                    var segment = upsert.Parameters.Add("$segment", Microsoft.Data.Sqlite.SqliteType.Text);
                    var start = upsert.Parameters.Add("$start", Microsoft.Data.Sqlite.SqliteType.Integer);
                    var seconds = upsert.Parameters.Add("$seconds", Microsoft.Data.Sqlite.SqliteType.Integer);
                    var summary = upsert.Parameters.Add("$summary", Microsoft.Data.Sqlite.SqliteType.Blob);
                    foreach (var bucket in upserts)
                    {
                        segment.Value = bucket.Segment;
                        start.Value = bucket.Start.ToUnixTimeSeconds();
                        seconds.Value = (long)bucket.Length.TotalSeconds;
                        summary.Value = bucket.Summary;
                        upsert.ExecuteNonQuery();
                    }
                }

                using var state = Command(connection, transaction,
                    "INSERT INTO summary_states (model, version, cursor, revision, saved_at) VALUES ($model, $version, $cursor, $revision, $now) "
                    + "ON CONFLICT (model, version) DO UPDATE SET cursor = excluded.cursor, revision = excluded.revision, saved_at = excluded.saved_at;");
                state.Parameters.AddWithValue("$model", model);
                state.Parameters.AddWithValue("$version", version);
                state.Parameters.AddWithValue("$cursor", cursor);
                state.Parameters.AddWithValue("$revision", revision);
                state.Parameters.AddWithValue("$now", now);
                return state.ExecuteNonQuery();
            },
            cancellationToken);
    }
}
