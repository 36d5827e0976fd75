using Microsoft.Data.Sqlite;
using Scorer.Store.Sqlite;

namespace Scorer.Store.Tests;

/// <summary>What the SQLite store does beyond the contract: its file settings, its schema bookkeeping, its layout.</summary>
public sealed class SqliteStoreTests : IDisposable
{
    private static readonly DateTimeOffset MigratedAt = new(2025, 2, 3, 4, 5, 6, 789, TimeSpan.Zero);

    private readonly TempFolder _folder = new();

    private string DatabasePath => Path.Combine(_folder.Path, "scorer.db");

    public void Dispose() => _folder.Dispose();

    [Fact]
    public void The_embedded_migrations_are_numbered_from_one_without_gaps()
    {
        var versions = Migration.All.Select(m => m.Version).ToArray();

        Assert.Equal(Enumerable.Range(1, versions.Length), versions);
        Assert.Equal("0001_initial.sql", Migration.All[0].Name);
        Assert.Equal(versions[^1], SqliteScorerStore.LatestSchemaVersion);
    }

    [Fact]
    public async Task Each_migration_is_recorded_once_stamped_by_the_injected_clock_however_often_stores_migrate()
    {
        await using (var first = SqliteScorerStore.ForFile(DatabasePath, new FixedClock(MigratedAt)))
        {
            await first.MigrateAsync();
            await first.MigrateAsync();
        }

        await using (var second = SqliteScorerStore.ForFile(DatabasePath, new FixedClock(MigratedAt.AddDays(1))))
        {
            await second.MigrateAsync();
        }

        var rows = Query("SELECT version, applied_at FROM schema_migrations ORDER BY version;", r => (r.GetInt32(0), r.GetInt64(1)));
        Assert.Equal(
            Migration.All.Select(m => (m.Version, MigratedAt.ToUnixTimeMilliseconds() * 1000)),
            rows);
    }

    [Fact]
    public async Task The_file_is_in_wal_mode_and_store_connections_use_normal_sync_foreign_keys_a_busy_timeout_and_rarer_checkpoints()
    {
        await using var store = SqliteScorerStore.ForFile(DatabasePath);
        await store.MigrateAsync();

        Assert.Equal(["wal"], Query("PRAGMA journal_mode;", r => r.GetString(0)));
        await using var connection = await store.OpenAsync(CancellationToken.None);
        Assert.Equal(1L, Pragma(connection, "synchronous"));
        Assert.Equal(1L, Pragma(connection, "foreign_keys"));
        Assert.Equal(30_000L, Pragma(connection, "busy_timeout"));
        Assert.Equal(16_384L, Pragma(connection, "wal_autocheckpoint"));
    }

    [Fact]
    public async Task The_busy_timeout_follows_the_connection_strings_default_timeout()
    {
        await using var store = SqliteScorerStore.ForConnectionString($"Data Source={DatabasePath};Default Timeout=7");
        await store.MigrateAsync();

        await using var connection = await store.OpenAsync(CancellationToken.None);
        Assert.Equal(7_000L, Pragma(connection, "busy_timeout"));
        Assert.Equal(1L, Pragma(connection, "foreign_keys"));
    }

    [Fact]
    public async Task A_store_on_a_path_in_missing_folders_creates_them()
    {
        var path = Path.Combine(_folder.Path, "a", "b", "c", "scorer.db");

        await using var store = SqliteScorerStore.ForFile(path);
        await store.MigrateAsync();

        Assert.True(File.Exists(path));
    }

    [Fact]
    public async Task A_store_from_a_connection_string_creates_the_folder_of_its_file_too()
    {
        var path = Path.Combine(_folder.Path, "nested", "scorer.db");

        await using var store = SqliteScorerStore.ForConnectionString($"Data Source={path}");
        await store.MigrateAsync();

        Assert.True(File.Exists(path));
    }

    [Theory]
    [InlineData("Data Source=:memory:")]
    [InlineData("Data Source=scorer;Mode=Memory;Cache=Shared")]
    [InlineData("Mode=ReadWriteCreate")]
    public void An_in_memory_or_unnamed_database_is_refused(string connectionString)
    {
        var error = Assert.Throws<ArgumentException>(() => SqliteScorerStore.ForConnectionString(connectionString));

        Assert.Contains("file", error.Message, StringComparison.Ordinal);
    }

    [Fact]
    public async Task A_database_at_a_newer_schema_version_is_refused_naming_both_versions()
    {
        await using (var store = SqliteScorerStore.ForFile(DatabasePath))
        {
            await store.MigrateAsync();
        }

        Execute("INSERT INTO schema_migrations (version, applied_at) VALUES (999, 0);");

        await using var newer = SqliteScorerStore.ForFile(DatabasePath);
        var error = await Assert.ThrowsAsync<InvalidOperationException>(() => newer.MigrateAsync());
        Assert.Contains("999", error.Message, StringComparison.Ordinal);
        Assert.Contains(SqliteScorerStore.LatestSchemaVersion.ToString(System.Globalization.CultureInfo.InvariantCulture), error.Message, StringComparison.Ordinal);
    }

    [Fact]
    public async Task Predictions_are_stored_with_big_endian_ids_microsecond_times_stage_text_and_real_doubles()
    {
        var id = Guid.Parse("00112233-4455-6677-8899-aabbccddeeff");
        var second = new DateTimeOffset(2025, 3, 14, 9, 26, 53, TimeSpan.Zero);
        var scoredAt = second.AddTicks(1_234_567);
        await using (var store = SqliteScorerStore.ForFile(DatabasePath))
        {
            await store.MigrateAsync();
            await store.WritePredictionsAsync([new PredictionRecord(id, "renewal", "1", Stage.Shadow, scoredAt, null, -0.0, 0.5, "{}")]);
        }

        var row = Assert.Single(Query(
            "SELECT hex(id), scored_at, stage, \"key\" IS NULL, typeof(eta), typeof(probability) FROM predictions;",
            r => (r.GetString(0), r.GetInt64(1), r.GetString(2), r.GetBoolean(3), r.GetString(4), r.GetString(5))));
        Assert.Equal(("00112233445566778899AABBCCDDEEFF", (second.ToUnixTimeSeconds() * 1_000_000) + 123_456, "shadow", true, "real", "real"), row);
    }

    [Fact]
    public async Task Times_are_kept_to_the_microsecond_rounded_towards_the_past_before_and_after_1970()
    {
        DateTimeOffset[] times =
        [
            new DateTimeOffset(2025, 3, 14, 9, 26, 53, TimeSpan.Zero).AddTicks(1_234_567),
            new DateTimeOffset(1969, 7, 20, 20, 17, 40, TimeSpan.Zero).AddTicks(-3),
            DateTimeOffset.UnixEpoch.AddTicks(-1),
            DateTimeOffset.UnixEpoch,
            new DateTimeOffset(9999, 12, 31, 23, 59, 59, TimeSpan.Zero).AddTicks(9_999_999),
            new DateTimeOffset(1, 1, 1, 0, 0, 0, TimeSpan.Zero),
        ];
        var rows = times.Select(t => new PredictionRecord(Guid.NewGuid(), "renewal", "1", Stage.Live, t, null, 0.25, 0.5, "{}")).ToArray();
        await using var store = SqliteScorerStore.ForFile(DatabasePath);
        await store.MigrateAsync();

        await store.WritePredictionsAsync(rows);

        foreach (var row in rows)
        {
            var back = await store.GetPredictionAsync(row.Id);
            var expected = row.ScoredAt.AddTicks(-(((row.ScoredAt.UtcTicks % 10) + 10) % 10));
            Assert.Equal(expected, back!.ScoredAt);
            Assert.True(back.ScoredAt <= row.ScoredAt && row.ScoredAt - back.ScoredAt < TimeSpan.FromMicroseconds(1));
        }
    }

    [Fact]
    public async Task The_schema_refuses_a_history_row_for_an_unknown_version()
    {
        await using var store = SqliteScorerStore.ForFile(DatabasePath);
        await store.MigrateAsync();
        await using var connection = await store.OpenAsync(CancellationToken.None);
        using var command = connection.CreateCommand();
        command.CommandText = "INSERT INTO stage_changes (model, version, from_stage, to_stage, actor, at) VALUES ('renewal', '404', NULL, 'live', 'x', 0);";

        var error = Assert.Throws<SqliteException>(() => command.ExecuteNonQuery());

        Assert.Contains("FOREIGN KEY", error.Message, StringComparison.Ordinal);
    }

    [Fact]
    public async Task A_cancelled_batch_writes_nothing()
    {
        await using var store = SqliteScorerStore.ForFile(DatabasePath);
        await store.MigrateAsync();
        using var cancelled = new CancellationTokenSource();
        await cancelled.CancelAsync();
        var rows = Enumerable.Range(0, 10)
            .Select(i => new PredictionRecord(Guid.NewGuid(), "renewal", "1", Stage.Live, DateTimeOffset.UnixEpoch.AddSeconds(i), null, 0.25, 0.5, "{}"))
            .ToArray();

        await Assert.ThrowsAnyAsync<OperationCanceledException>(() => store.WritePredictionsAsync(rows, cancelled.Token));

        Assert.Equal(0, await store.CountPredictionsAsync("renewal"));
    }

    [Fact]
    public async Task A_write_beyond_the_size_limit_is_refused_as_on_a_full_disk_stores_nothing_and_is_reported_until_none_was_refused_for_a_minute()
    {
        var clock = new FixedClock(MigratedAt);
        await using var store = SqliteScorerStore.ForFile(DatabasePath, new SqliteStoreOptions { MaxSizeBytes = SqliteScorerStore.MinimumMaxSizeBytes }, clock);
        await store.MigrateAsync();
        Assert.Null(store.Full);
        var features = "{\"note\":\"" + new string('x', 2000) + "\"}";
        PredictionRecord[] Batch(int first, int n) => [.. Enumerable.Range(first, n)
            .Select(i => new PredictionRecord(Guid.NewGuid(), "renewal", "1", Stage.Live, DateTimeOffset.UnixEpoch.AddSeconds(i), $"policy-{i}", 0.25, 0.5, features))];

        // About 2 kB a row against 1 MiB: the fourth batch of 200 cannot fit.
        StoreFullException? refused = null;
        var stored = 0;
        for (var b = 0; b < 10 && refused is null; b++)
        {
            try
            {
                await store.WritePredictionsAsync(Batch(b * 200, 200));
                stored += 200;
            }
            catch (StoreFullException ex)
            {
                refused = ex;
            }
        }

        Assert.NotNull(refused);
        Assert.Equal(13, Assert.IsType<SqliteException>(refused.InnerException).SqliteErrorCode); // SQLITE_FULL
        Assert.Contains("1 MiB", refused.Message, StringComparison.Ordinal);
        Assert.Equal(stored, await store.CountPredictionsAsync("renewal"));
        Assert.Equal(MigratedAt, store.Full!.Since);
        Assert.Equal(1, store.FullWrites);

        // Still full: the same refusal again, counted, and the first one's time kept.
        clock.Now = MigratedAt.AddSeconds(30);
        await Assert.ThrowsAsync<StoreFullException>(() => store.WritePredictionsAsync(Batch(10_000, 200)));
        Assert.Equal(MigratedAt, store.Full!.Since);
        Assert.Equal(2, store.FullWrites);

        // Room made inside the file (rows deleted): the next write succeeds; the store says it was full until no write
        // has been refused for a minute (a small write that fits does not clear it while larger ones are refused).
        Execute("DELETE FROM predictions WHERE key <> 'policy-0';");
        await store.WritePredictionsAsync(Batch(20_000, 200));
        Assert.Equal(201, await store.CountPredictionsAsync("renewal"));
        clock.Now = MigratedAt.AddSeconds(30) + SqliteScorerStore.FullHold - TimeSpan.FromTicks(1);
        Assert.NotNull(store.Full);
        clock.Now = MigratedAt.AddSeconds(30) + SqliteScorerStore.FullHold;
        Assert.Null(store.Full);
        Assert.Equal(2, store.FullWrites);
    }

    [Fact]
    public void A_size_limit_below_one_mebibyte_is_refused_naming_the_least()
    {
        var ex = Assert.Throws<ArgumentOutOfRangeException>(() => SqliteScorerStore.ForFile(DatabasePath, new SqliteStoreOptions { MaxSizeBytes = 4096 }));
        Assert.Contains("at least 1048576", ex.Message, StringComparison.Ordinal);
    }

    private static long Pragma(SqliteConnection connection, string name)
    {
        using var command = connection.CreateCommand();
        command.CommandText = $"PRAGMA {name};";
        return (long)command.ExecuteScalar()!;
    }

    private List<T> Query<T>(string sql, Func<SqliteDataReader, T> read)
    {
        using var connection = new SqliteConnection($"Data Source={DatabasePath};Pooling=False");
        connection.Open();
        using var command = connection.CreateCommand();
        command.CommandText = sql;
        using var reader = command.ExecuteReader();
        var rows = new List<T>();
        while (reader.Read())
        {
            rows.Add(read(reader));
        }

        return rows;
    }

    private void Execute(string sql)
    {
        using var connection = new SqliteConnection($"Data Source={DatabasePath};Pooling=False");
        connection.Open();
        using var command = connection.CreateCommand();
        command.CommandText = sql;
        command.ExecuteNonQuery();
    }
}
