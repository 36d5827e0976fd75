using Scorer.Host;
using Microsoft.Extensions.Logging.Abstractions;
using Scorer.Store;
using Scorer.Store.Sqlite;

namespace Scorer.Server.Tests;

/// <summary>The prediction log over a real SQLite store that is made slow or made to fail for a while.</summary>
public sealed class PredictionLogTests : IDisposable
{
    private readonly TestFolder _folder = new();

    public void Dispose() => _folder.Dispose();

    /// <summary>The real store, with writes held at a gate or failed on demand.</summary>
    private sealed class ThrottledStore(IScorerStore inner) : IScorerStore
    {
        public SemaphoreSlim Gate { get; } = new(0, int.MaxValue);
        public int FailuresLeft { get; set; }
        public int LostRepliesLeft { get; set; }
        public bool Held { get; set; }

        public async Task WritePredictionsAsync(IReadOnlyList<PredictionRecord> batch, CancellationToken cancellationToken = default)
        {
            if (Held)
            {
                await Gate.WaitAsync(cancellationToken);
            }

            if (FailuresLeft > 0)
            {
                FailuresLeft--;
                throw new IOException("store unavailable (test)");
            }

            await inner.WritePredictionsAsync(batch, cancellationToken);
            if (LostRepliesLeft > 0)
            {
                LostRepliesLeft--;
                throw new IOException("connection lost after the commit (test)");
            }
        }

        public Task MigrateAsync(CancellationToken cancellationToken = default) => inner.MigrateAsync(cancellationToken);
        public Task<IReadOnlyList<ModelVersionRecord>> GetVersionsAsync(CancellationToken cancellationToken = default) => inner.GetVersionsAsync(cancellationToken);
        public Task<ModelVersionRecord> AddVersionAsync(ModelVersionRecord version, string actor, CancellationToken cancellationToken = default) => inner.AddVersionAsync(version, actor, cancellationToken);
        public Task ChangeStagesAsync(IReadOnlyList<StageChange> changes, CancellationToken cancellationToken = default) => inner.ChangeStagesAsync(changes, cancellationToken);
        public Task<IReadOnlyList<StageChange>> GetHistoryAsync(string model, CancellationToken cancellationToken = default) => inner.GetHistoryAsync(model, cancellationToken);
        public Task<PredictionRecord?> GetPredictionAsync(Guid id, CancellationToken cancellationToken = default) => inner.GetPredictionAsync(id, cancellationToken);
        public Task<IReadOnlyList<PredictionRecord>> GetPredictionsAsync(string model, string? version, DateTimeOffset from, DateTimeOffset to, CancellationToken cancellationToken = default) => inner.GetPredictionsAsync(model, version, from, to, cancellationToken);
        public Task<long> CountPredictionsAsync(string model, string? version = null, CancellationToken cancellationToken = default) => inner.CountPredictionsAsync(model, version, cancellationToken);
        public Task<long> CountPredictionsByMinuteAsync(string model, string version, DateTimeOffset from, DateTimeOffset to, CancellationToken cancellationToken = default) => inner.CountPredictionsByMinuteAsync(model, version, from, to, cancellationToken);
        public Task<OutcomeReceipt> RecordOutcomesAsync(string model, IReadOnlyList<OutcomeReport> reports, ConflictPolicy policy, DateTimeOffset recordedAt, CancellationToken cancellationToken = default) => inner.RecordOutcomesAsync(model, reports, policy, recordedAt, cancellationToken);
        public Task<int> RecordImplicitNegativesAsync(string model, DateTimeOffset maturedBefore, DateTimeOffset recordedAt, int limit = 10_000, CancellationToken cancellationToken = default) => inner.RecordImplicitNegativesAsync(model, maturedBefore, recordedAt, limit, cancellationToken);
        public Task AddDriftCountsAsync(IReadOnlyList<DriftCount> counts, CancellationToken cancellationToken = default) => inner.AddDriftCountsAsync(counts, cancellationToken);
        public Task<IReadOnlyList<DriftCount>> GetDriftCountsAsync(string model, string version, DateTimeOffset from, DateTimeOffset to, CancellationToken cancellationToken = default) => inner.GetDriftCountsAsync(model, version, from, to, cancellationToken);
        public Task<IReadOnlyList<LabelledPrediction>> GetLabelledAsync(string model, string? version, DateTimeOffset from, DateTimeOffset to, CancellationToken cancellationToken = default) => inner.GetLabelledAsync(model, version, from, to, cancellationToken);
        public Task<LabelledChanges> GetLabelledChangesAsync(string model, string version, long cursor, int? limit = null, CancellationToken cancellationToken = default) => inner.GetLabelledChangesAsync(model, version, cursor, limit, cancellationToken);
        public Task<IReadOnlyList<LabelledPoint>> GetLabelledUpToAsync(string model, string version, DateTimeOffset from, DateTimeOffset to, long cursor, CancellationToken cancellationToken = default) => inner.GetLabelledUpToAsync(model, version, from, to, cursor, cancellationToken);
        public Task<SummaryState?> GetSummaryStateAsync(string model, string version, CancellationToken cancellationToken = default) => inner.GetSummaryStateAsync(model, version, cancellationToken);
        public Task<IReadOnlyList<StoredSummary>> GetSummariesAsync(string model, string version, long afterRevision, CancellationToken cancellationToken = default) => inner.GetSummariesAsync(model, version, afterRevision, cancellationToken);
        public Task SaveSummariesAsync(string model, string version, long cursor, long revision, IReadOnlyList<StoredSummary> upserts, IReadOnlyList<(string Segment, DateTimeOffset Start)> deletes, string lease, CancellationToken cancellationToken = default) => inner.SaveSummariesAsync(model, version, cursor, revision, upserts, deletes, lease, cancellationToken);
        public Task<bool> TryHoldLeaseAsync(string name, CancellationToken cancellationToken = default) => inner.TryHoldLeaseAsync(name, cancellationToken);
        public Task ReleaseLeaseAsync(string name, CancellationToken cancellationToken = default) => inner.ReleaseLeaseAsync(name, cancellationToken);
        public Task SaveChartStateAsync(string model, string version, string state, string lease, CancellationToken cancellationToken = default) => inner.SaveChartStateAsync(model, version, state, lease, cancellationToken);
        public Task<string?> GetChartStateAsync(string model, string version, CancellationToken cancellationToken = default) => inner.GetChartStateAsync(model, version, cancellationToken);
        public Task<IReadOnlyList<PairedOutcome>> GetPairedAsync(string model, string liveVersion, string shadowVersion, DateTimeOffset from, DateTimeOffset to, int? latest = null, CancellationToken cancellationToken = default) => inner.GetPairedAsync(model, liveVersion, shadowVersion, from, to, latest, cancellationToken);
        public Task<IReadOnlyList<LabelledRow>> GetLabelledRowsAsync(string model, string? version, DateTimeOffset from, DateTimeOffset to, LabelledRowPosition? after, int limit, CancellationToken cancellationToken = default) => inner.GetLabelledRowsAsync(model, version, from, to, after, limit, cancellationToken);
        public ValueTask DisposeAsync() => inner.DisposeAsync();
    }

    private static PredictionRecord Row(int i) =>
        new(Guid.CreateVersion7(), "m", "1", Stage.Live, DateTimeOffset.UnixEpoch.AddSeconds(i), null, 0.1 * i, 0.5, "{}");

    private async Task<ThrottledStore> StoreAsync()
    {
        var store = new ThrottledStore(SqliteScorerStore.ForFile(_folder.Store));
        await store.MigrateAsync();
        return store;
    }

    [Fact]
    public async Task A_slow_store_fills_the_queue_to_its_bound_and_every_row_beyond_is_counted_as_dropped()
    {
        var store = await StoreAsync();
        store.Held = true;
        var log = new PredictionLog(store, new PredictionLogOptions { Capacity = 100, MaxBatch = 10 }, NullLogger<PredictionLog>.Instance);
        var accepted = Enumerable.Range(0, 1000).Count(i => log.TryEnqueue(Row(i)));

        // Held: at most one batch in the writer's hands plus the queue's bound.
        Assert.InRange(accepted, 100, 110);
        Assert.Equal(1000 - accepted, log.Dropped);
        Assert.InRange(log.Depth, 0, 100);

        store.Held = false;
        store.Gate.Release(int.MaxValue / 2);
        await log.StopAsync();
        Assert.Equal(accepted, log.Written);
        Assert.Equal(accepted, await store.CountPredictionsAsync("m"));
        await store.DisposeAsync();
    }

    [Fact]
    public async Task A_failing_store_is_retried_and_no_accepted_row_is_lost()
    {
        var store = await StoreAsync();
        store.FailuresLeft = 3;
        var log = new PredictionLog(store, new PredictionLogOptions { MaxBatch = 50, MaxDelay = TimeSpan.FromMilliseconds(1) }, NullLogger<PredictionLog>.Instance);
        for (var i = 0; i < 500; i++)
        {
            Assert.True(log.TryEnqueue(Row(i)));
        }

        await log.StopAsync();
        Assert.Equal(3, log.FailedWrites);
        Assert.Equal(0, log.Dropped);
        Assert.Equal(500, await store.CountPredictionsAsync("m"));
        await store.DisposeAsync();
    }

    [Fact]
    public async Task A_batch_committed_whose_reply_was_lost_is_not_written_again_and_the_log_goes_on()
    {
        var store = await StoreAsync();
        store.LostRepliesLeft = 2;
        var log = new PredictionLog(store, new PredictionLogOptions { MaxBatch = 50, MaxDelay = TimeSpan.FromMilliseconds(1) }, NullLogger<PredictionLog>.Instance);
        for (var i = 0; i < 500; i++)
        {
            Assert.True(log.TryEnqueue(Row(i)));
        }

        await log.StopAsync();
        Assert.Equal(2, log.FailedWrites); // one failure per lost reply: the retry finds the batch stored and moves on
        Assert.Equal(0, log.Dropped);
        Assert.Equal(500, await store.CountPredictionsAsync("m"));
        await store.DisposeAsync();
    }

    [Fact]
    public async Task Stopping_drains_what_is_queued_and_refuses_what_comes_after()
    {
        var store = await StoreAsync();
        var log = new PredictionLog(store, new PredictionLogOptions { MaxBatch = 1000, MaxDelay = TimeSpan.FromSeconds(5) }, NullLogger<PredictionLog>.Instance);
        for (var i = 0; i < 2500; i++)
        {
            log.TryEnqueue(Row(i));
        }

        await log.StopAsync();
        Assert.Equal(2500, await store.CountPredictionsAsync("m"));
        Assert.False(log.TryEnqueue(Row(9999)));
        Assert.Equal(1, log.Dropped);
        await store.DisposeAsync();
    }

    [Fact]
    public async Task A_batch_short_of_its_size_is_written_when_its_delay_has_passed_on_the_log_clock_and_not_before()
    {
        var store = await StoreAsync();
        var time = new Microsoft.Extensions.Time.Testing.FakeTimeProvider(DateTimeOffset.UnixEpoch.AddDays(20_000));
        var log = new PredictionLog(store, new PredictionLogOptions { MaxBatch = 100, MaxDelay = TimeSpan.FromSeconds(5) }, NullLogger<PredictionLog>.Instance, time);
        for (var i = 0; i < 3; i++)
        {
            Assert.True(log.TryEnqueue(Row(i)));
        }

        // The writer has taken the rows and waits for more (they count as pending, none is written yet).
        Assert.True(await Files.EventuallyAsync(() => Task.FromResult(log.Depth == 0 && log.Pending == 3), TimeSpan.FromSeconds(30)));
        time.Advance(TimeSpan.FromSeconds(4));
        await Task.Delay(100);
        Assert.Equal(0, log.Written);

        Assert.True(await Files.EventuallyAsync(() =>
        {
            time.Advance(TimeSpan.FromSeconds(1)); // the delay's end, and past it
            return Task.FromResult(log.Written == 3);
        }, TimeSpan.FromSeconds(30)));
        await log.StopAsync();
        await store.DisposeAsync();
    }

    [Fact]
    public async Task A_log_that_writes_nothing_for_longer_than_its_stall_time_makes_readiness_say_it_is_not_draining()
    {
        // Arrange: a store whose writes fail until told otherwise, on a fake clock.
        var store = await StoreAsync();
        store.FailuresLeft = int.MaxValue;
        var time = new Microsoft.Extensions.Time.Testing.FakeTimeProvider(DateTimeOffset.UnixEpoch.AddDays(20_000));
        var log = new PredictionLog(store, new PredictionLogOptions { MaxBatch = 50, MaxDelay = TimeSpan.FromMilliseconds(1), StallAfter = TimeSpan.FromSeconds(30) },
            NullLogger<PredictionLog>.Instance, time);
        var registry = new Scorer.Registry.ModelRegistry(new Scorer.Registry.RegistryOptions { ModelsPath = _folder.Models }, store, time,
            NullLogger<Scorer.Registry.ModelRegistry>.Instance);
        await registry.ReloadAsync();
        var readiness = new ReadinessCheck(registry, store, [], log);
        for (var i = 0; i < 10; i++)
        {
            Assert.True(log.TryEnqueue(Row(i)));
        }

        Assert.True(await Files.EventuallyAsync(() =>
        {
            time.Advance(TimeSpan.FromMilliseconds(1)); // the batch's MaxDelay passes on the fake clock
            return Task.FromResult(log.FailedWrites >= 1);
        }, TimeSpan.FromSeconds(30)));
        Assert.DoesNotContain((await readiness.CheckAsync()).Reasons, r => r.Contains("not draining", StringComparison.Ordinal));

        // Act: 31 s pass without a successful write.
        time.Advance(TimeSpan.FromSeconds(31));

        // Assert: degraded, saying so; then a write gets through and the reason goes.
        Assert.True(log.Stalled);
        var (ready, degraded, reasons) = await readiness.CheckAsync();
        Assert.True(degraded);
        Assert.Contains(reasons, r => r.StartsWith("degraded: prediction log not draining (10 rows waiting", StringComparison.Ordinal));
        store.FailuresLeft = 0;
        Assert.True(await Files.EventuallyAsync(() =>
        {
            time.Advance(TimeSpan.FromSeconds(1)); // the writer's backoff runs on the fake clock
            return Task.FromResult(log.Written == 10);
        }, TimeSpan.FromSeconds(30)));
        Assert.False(log.Stalled);
        Assert.DoesNotContain((await readiness.CheckAsync()).Reasons, r => r.Contains("not draining", StringComparison.Ordinal));
        _ = ready;
        await log.StopAsync();
        await store.DisposeAsync();
    }
}
