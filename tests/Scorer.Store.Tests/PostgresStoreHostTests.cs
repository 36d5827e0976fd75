using Microsoft.Extensions.Time.Testing;
using Scorer.Store.Postgres;

namespace Scorer.Store.Tests;

/// <summary>The PostgreSQL store's hosted service: the retention loop on the host's clock, and the store's closing.</summary>
[RequiresPostgres]
public sealed class PostgresStoreHostTests : IAsyncLifetime
{
    private static readonly DateTimeOffset T0 = new(2025, 3, 14, 9, 0, 0, TimeSpan.Zero);

    private readonly string _schema = PostgresServer.NewSchemaName();

    public Task InitializeAsync() => Task.CompletedTask;

    public Task DisposeAsync() => PostgresServer.DropSchemaAsync(_schema);

    [Fact]
    public async Task Retention_runs_at_start_and_then_every_interval_of_the_injected_clock_dropping_the_day_that_has_aged_past_it()
    {
        // Arrange: a day's retention, pruned every two days; one labelled prediction half an hour old when the host starts.
        var clock = new FakeTimeProvider(T0.AddMinutes(30));
        var options = new PostgresStoreOptions { Schema = _schema, PredictionRetention = TimeSpan.FromDays(1), PruneInterval = TimeSpan.FromDays(2) };
        var store = PostgresScorerStore.ForConnectionString(await PostgresServer.ConnectionStringAsync(), options, clock);
        await store.MigrateAsync();
        await store.AddVersionAsync(new ModelVersionRecord("renewal", "1", "aaaa", T0, Stage.Live), "loader");
        var old = new PredictionRecord(Guid.CreateVersion7(), "renewal", "1", Stage.Live, T0, "policy-1", 0.1, 0.52, "{}"); // an id not carrying its time
        await store.WritePredictionsAsync([old]);
        await store.RecordOutcomesAsync("renewal", [new OutcomeReport(old.Id, null, 1)], ConflictPolicy.KeepFirst, T0.AddMinutes(10));
        var logger = new RecordingLogger<PostgresStoreHost>();
        var counters = new RetentionCounters();
        var host = new PostgresStoreHost(store, clock, logger, counters);

        // Act and assert: the pass at start finds it within the retention, and makes the partitions of its day and the next days.
        await host.StartAsync(CancellationToken.None);
        Assert.Contains("0 predictions deleted", await logger.NextAsync(PostgresStoreHost.Events.Pruned), StringComparison.Ordinal);
        Assert.NotNull(await store.GetPredictionAsync(old.Id));

        // Two days on the clock: the next pass runs, and the whole day of the prediction is past the retention.
        clock.Advance(TimeSpan.FromDays(2));
        Assert.Contains("1 predictions deleted", await logger.NextAsync(PostgresStoreHost.Events.Pruned), StringComparison.Ordinal);
        Assert.Null(await store.GetPredictionAsync(old.Id));
        Assert.Single(await store.GetLabelledAsync("renewal", "1", T0, T0.AddHours(1))); // the outcome stays (no outcome retention)
        Assert.Equal((2L, 1L, 1L), (counters.Passes, counters.PredictionsDeleted, counters.PartitionsDropped));
        Assert.InRange(counters.PartitionsCreated, PostgresScorerStore.PartitionDaysAhead + 2, 100);

        // Stopped, the loop ends; once the host has stopped, the store is closed.
        await host.StopAsync(CancellationToken.None);
        await host.StoppedAsync(CancellationToken.None);
        await Assert.ThrowsAsync<ObjectDisposedException>(() => store.GetVersionsAsync());
    }

    [Fact]
    public async Task Without_a_retention_the_loop_only_makes_partitions_ahead_and_stopping_still_closes_the_store()
    {
        var clock = new FakeTimeProvider(T0);
        var store = PostgresScorerStore.ForConnectionString(await PostgresServer.ConnectionStringAsync(), new PostgresStoreOptions { Schema = _schema }, clock);
        await store.MigrateAsync();
        var logger = new RecordingLogger<PostgresStoreHost>();
        var host = new PostgresStoreHost(store, clock, logger);

        await host.StartAsync(CancellationToken.None);
        Assert.Contains($"{(PostgresScorerStore.PartitionDaysAhead + 1) * 2} day partitions created", await logger.NextAsync(PostgresStoreHost.Events.Partitions), StringComparison.Ordinal);
        await host.StopAsync(CancellationToken.None);
        await host.StoppedAsync(CancellationToken.None);

        Assert.Equal(0, logger.Count(PostgresStoreHost.Events.Pruned));
        await Assert.ThrowsAsync<ObjectDisposedException>(() => store.GetVersionsAsync());
    }

    [Theory]
    [InlineData(0)]
    [InlineData(-1)]
    public void A_prune_interval_that_is_not_positive_is_refused_naming_it(int minutes)
    {
        var error = Assert.Throws<ArgumentException>(() => PostgresScorerStore.ForConnectionString(
            "Host=127.0.0.1;Username=postgres", new PostgresStoreOptions { PruneInterval = TimeSpan.FromMinutes(minutes) }));

        Assert.Contains("PruneInterval", error.Message, StringComparison.Ordinal);
    }
}
