using System.Globalization;
using Microsoft.Data.Sqlite;
using Microsoft.Extensions.Time.Testing;
using Scorer.Store.Sqlite;
using Xunit.Abstractions;

namespace Scorer.Store.Tests;

/// <summary>
/// The SQLite store's retention beyond the contract: deletes in bounded batches, the last written row kept, the loop
/// in its host on the injected clock, and only the holder of the retention lease pruning among instances on one file.
/// </summary>
public sealed class SqliteRetentionTests(ITestOutputHelper output) : IAsyncLifetime
{
    private static readonly DateTimeOffset T0 = new(2025, 3, 14, 9, 0, 0, TimeSpan.Zero);
    private static readonly TimeSpan Month = TimeSpan.FromDays(30);

    private readonly TempFolder _folder = new();
    private readonly List<SqliteScorerStore> _stores = [];

    public Task InitializeAsync() => Task.CompletedTask;

    public async Task DisposeAsync()
    {
        foreach (var store in _stores)
        {
            await store.DisposeAsync();
        }

        _folder.Dispose();
    }

    [Fact]
    public async Task Twenty_thousand_old_rows_with_a_batch_of_five_thousand_are_deleted_in_four_short_transactions()
    {
        var store = await OpenAsync(new SqliteStoreOptions { PredictionRetention = Month, PruneBatchSize = 5_000 });
        // A model the registry does not know: no outcome is expected, so every old row may go. Rows as the service
        // writes them: a key and a feature object of a few hundred bytes.
        await WriteAsync(store, Enumerable.Range(0, 20_000).Select(i => Row("pumps", T0.AddSeconds(i), i)));
        var recent = Row("pumps", T0.AddDays(39), 20_000);
        await store.WritePredictionsAsync([recent]);

        var result = await store.PruneAsync(T0.AddDays(40));

        output.WriteLine(string.Create(CultureInfo.InvariantCulture, $"{result.Batches} batches, the longest {result.LongestBatch.TotalMilliseconds:F1} ms"));
        Assert.Equal((20_000, 0, 4), (result.PredictionsDeleted, result.KeptAwaitingOutcome, result.Batches));
        Assert.Equal(1, await store.CountPredictionsAsync("pumps"));
        Assert.InRange(result.LongestBatch, TimeSpan.FromTicks(1), TimeSpan.FromSeconds(1));
        Assert.Equal(PruneResult.None, await store.PruneAsync(T0.AddDays(40)));
    }

    [Fact]
    public async Task A_writer_waits_for_one_batch_at_most_while_a_pass_runs()
    {
        var store = await OpenAsync(new SqliteStoreOptions { PredictionRetention = Month, PruneBatchSize = 1_000 });
        await WriteAsync(store, Enumerable.Range(0, 20_000).Select(i => Row("pumps", T0.AddSeconds(i), i)));
        await store.WritePredictionsAsync([Row("renewal", T0.AddDays(39), 99_999)]);

        // The pass and a stream of small writes side by side: each write waits for the batch in hand, then goes in.
        var pass = Task.Run(() => store.PruneAsync(T0.AddDays(40)));
        var writes = 0;
        var longestWrite = TimeSpan.Zero;
        do
        {
            var started = System.Diagnostics.Stopwatch.GetTimestamp();
            await store.WritePredictionsAsync([Row("renewal", T0.AddDays(39).AddMilliseconds(writes + 1), 100_000 + writes)]);
            var took = System.Diagnostics.Stopwatch.GetElapsedTime(started);
            longestWrite = took > longestWrite ? took : longestWrite;
            writes++;
        }
        while (!pass.IsCompleted);

        var result = await pass;
        output.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"{writes} writes during {result.Batches} batches; the longest batch {result.LongestBatch.TotalMilliseconds:F1} ms, the longest write {longestWrite.TotalMilliseconds:F1} ms"));
        Assert.Equal((20_000, 20), (result.PredictionsDeleted, result.Batches));
        Assert.Equal(writes + 1, await store.CountPredictionsAsync("renewal"));
        Assert.InRange(writes, 2, int.MaxValue); // the writes went in between the batches, not after the whole pass
    }

    [Fact]
    public async Task The_row_written_last_is_kept_so_that_the_log_never_gives_a_rowid_twice()
    {
        var store = await OpenAsync(new SqliteStoreOptions { PredictionRetention = Month });
        var rows = Enumerable.Range(0, 3).Select(i => Row("pumps", T0.AddSeconds(i), i)).ToArray();
        await store.WritePredictionsAsync(rows);

        var result = await store.PruneAsync(T0.AddDays(40));

        Assert.Equal((2, 1), (result.PredictionsDeleted, result.KeptAwaitingOutcome));
        Assert.NotNull(await store.GetPredictionAsync(rows[2].Id));
        await store.WritePredictionsAsync([Row("pumps", T0.AddDays(40), 3)]);
        Assert.Equal([3L, 4L], await RowIdsAsync(store));
    }

    [Fact]
    public async Task The_host_prunes_at_start_and_every_interval_of_the_injected_clock_and_counts_what_it_did()
    {
        var clock = new FakeTimeProvider(T0.AddMinutes(30));
        var store = await OpenAsync(new SqliteStoreOptions { PredictionRetention = TimeSpan.FromHours(1), PruneInterval = TimeSpan.FromHours(1) }, clock);
        var old = Row("pumps", T0, 0);
        await store.WritePredictionsAsync([old, Row("pumps", T0.AddHours(5), 1)]);
        var logger = new RecordingLogger<SqliteStoreHost>();
        var counters = new RetentionCounters();
        var host = new SqliteStoreHost(store, clock, logger, counters);

        await host.StartAsync(CancellationToken.None);
        Assert.Contains("0 predictions deleted", await logger.NextAsync(SqliteStoreHost.Events.Pruned), StringComparison.Ordinal);
        Assert.NotNull(await store.GetPredictionAsync(old.Id));

        clock.Advance(TimeSpan.FromHours(1));
        Assert.Contains("1 predictions deleted", await logger.NextAsync(SqliteStoreHost.Events.Pruned), StringComparison.Ordinal);
        Assert.Null(await store.GetPredictionAsync(old.Id));
        Assert.Equal((2L, 1L, 1L), (counters.Passes, counters.PredictionsDeleted, counters.Batches));
        Assert.Equal(clock.GetUtcNow(), counters.LastPass);

        await host.StopAsync(CancellationToken.None);
        await host.StoppedAsync(CancellationToken.None);
        await Assert.ThrowsAsync<ObjectDisposedException>(() => store.GetVersionsAsync());
    }

    [Fact]
    public async Task Of_two_store_instances_on_one_file_only_the_holder_of_the_retention_lease_prunes_until_it_stops()
    {
        // The lease outlasts the interval, so the holder renews it at each pass and keeps it.
        var clock = new FakeTimeProvider(T0.AddDays(40));
        var options = new SqliteStoreOptions { PredictionRetention = Month, PruneInterval = TimeSpan.FromHours(1), LeaseDuration = TimeSpan.FromHours(2) };
        var first = await OpenAsync(options, clock);
        var second = await OpenAsync(options, clock);
        // One row ages out of the retention at each pass: at the start, an hour on, two hours on.
        await first.WritePredictionsAsync([Row("pumps", T0, 0), Row("pumps", T0.AddDays(10).AddMinutes(30), 1), Row("pumps", T0.AddDays(10).AddMinutes(90), 2),
            Row("pumps", T0.AddDays(39), 3)]);
        var firstLog = new RecordingLogger<SqliteStoreHost>();
        var secondLog = new RecordingLogger<SqliteStoreHost>();
        var firstHost = new SqliteStoreHost(first, clock, firstLog);
        var secondHost = new SqliteStoreHost(second, clock, secondLog);

        await firstHost.StartAsync(CancellationToken.None);
        Assert.Contains("1 predictions deleted", await firstLog.NextAsync(SqliteStoreHost.Events.Pruned), StringComparison.Ordinal);
        await secondHost.StartAsync(CancellationToken.None);
        await secondLog.NextAsync(SqliteStoreHost.Events.NotHolder);

        // An hour on: both loops tick; the holder prunes the row that has aged out since, the other still does not.
        clock.Advance(TimeSpan.FromHours(1));
        Assert.Contains("1 predictions deleted", await firstLog.NextAsync(SqliteStoreHost.Events.Pruned), StringComparison.Ordinal);
        await secondLog.NextAsync(SqliteStoreHost.Events.NotHolder);
        Assert.Equal(0, secondLog.Count(SqliteStoreHost.Events.Pruned));

        // The holder stops (and gives its leases up): at its next tick the other takes the lease over and prunes.
        await firstHost.StopAsync(CancellationToken.None);
        await firstHost.StoppedAsync(CancellationToken.None);
        clock.Advance(TimeSpan.FromHours(1));
        Assert.Contains("1 predictions deleted", await secondLog.NextAsync(SqliteStoreHost.Events.Pruned), StringComparison.Ordinal);
        Assert.Equal(1, await second.CountPredictionsAsync("pumps"));
        await secondHost.StopAsync(CancellationToken.None);
    }

    [Theory]
    [InlineData(10, 20)]
    [InlineData(null, 20)]
    public void An_outcome_retention_shorter_than_the_prediction_retention_or_without_one_is_refused_naming_it(int? predictionDays, int outcomeDays)
    {
        var error = Assert.Throws<ArgumentException>(() => SqliteScorerStore.ForFile(Path.Combine(_folder.Path, "refused.db"), new SqliteStoreOptions
        {
            PredictionRetention = predictionDays is { } p ? TimeSpan.FromDays(p * 3) : null,
            OutcomeRetention = TimeSpan.FromDays(outcomeDays),
        }));

        Assert.Contains("OutcomeRetention", error.Message, StringComparison.Ordinal);
        Assert.Contains("at least", error.Message, StringComparison.Ordinal);
    }

    [Fact]
    public void A_prune_batch_size_below_one_is_refused_naming_it()
    {
        var error = Assert.Throws<ArgumentOutOfRangeException>(() =>
            SqliteScorerStore.ForFile(Path.Combine(_folder.Path, "refused.db"), new SqliteStoreOptions { PruneBatchSize = 0 }));

        Assert.Contains("PruneBatchSize", error.Message, StringComparison.Ordinal);
    }

    private async Task<SqliteScorerStore> OpenAsync(SqliteStoreOptions options, TimeProvider? clock = null)
    {
        var store = SqliteScorerStore.ForFile(Path.Combine(_folder.Path, "scorer.db"), options, clock);
        _stores.Add(store);
        await store.MigrateAsync();
        return store;
    }

    private static async Task WriteAsync(SqliteScorerStore store, IEnumerable<PredictionRecord> rows)
    {
        foreach (var chunk in rows.Chunk(2_000))
        {
            await store.WritePredictionsAsync(chunk);
        }
    }

    /// <summary>A row with a key and about 300 bytes of features, its id carrying its time.</summary>
    private static PredictionRecord Row(string model, DateTimeOffset at, int i) => new(
        PredictionIds.Next(at), model, "1", Stage.Live, at, string.Create(CultureInfo.InvariantCulture, $"policy-{i}"), 0.25, 0.5,
        string.Create(CultureInfo.InvariantCulture,
            $"{{\"age\":{i % 90},\"region\":\"north-{i % 17}\",\"vehicle\":\"estate\",\"premium\":{i * 1.5},\"claims\":{i % 4},\"tenure\":{i % 30},\"channel\":\"broker\",\"payment\":\"monthly\",\"cover\":\"comprehensive\",\"excess\":250,\"mileage\":{i % 20000},\"garaged\":true,\"note\":\"0123456789abcdef0123456789abcdef0123456789abcdef0123456789abcdef\"}}"));

    private static async Task<List<long>> RowIdsAsync(SqliteScorerStore store)
    {
        await using var connection = await store.OpenAsync(CancellationToken.None);
        await using var command = connection.CreateCommand();
        command.CommandText = "SELECT rowid FROM predictions ORDER BY rowid;";
        await using var reader = await command.ExecuteReaderAsync();
        var ids = new List<long>();
        while (await reader.ReadAsync())
        {
            ids.Add(reader.GetInt64(0));
        }

        return ids;
    }
}
