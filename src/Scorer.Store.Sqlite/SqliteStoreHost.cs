using Microsoft.Extensions.Hosting;
using Microsoft.Extensions.Logging;

namespace Scorer.Store.Sqlite;

/// <summary>
/// The SQLite store's part in the host's life: the retention (when <see cref="SqliteStoreOptions.PredictionRetention"/>
/// is set), applied at start and then every <see cref="SqliteStoreOptions.PruneInterval"/> on the host's clock, by the
/// one store instance among all those on the file that holds the lease <see cref="RetentionRules.LeaseName"/> (tried
/// at every tick; see <see cref="SqliteScorerStore.PruneAsync"/>); and, once the host has stopped (every hosted
/// service's StopAsync returned, the prediction log drained), the store's closing, giving up its leases.
/// </summary>
/// <remarks>
/// A failed pass is logged, counted and tried again at the next tick; passes of one instance never overlap. A pass
/// that outlasts the lease duration could meet another instance's pass; both only delete rows that have left the
/// retention, so the rows deleted are the same.
/// </remarks>
public sealed partial class SqliteStoreHost(SqliteScorerStore store, TimeProvider time, ILogger<SqliteStoreHost> logger, RetentionCounters? counters = null)
    : IHostedLifecycleService
{
    private readonly CancellationTokenSource _stopping = new();
    private readonly RetentionCounters _counters = counters ?? new RetentionCounters();
    private Task _retention = Task.CompletedTask;

    public Task StartingAsync(CancellationToken cancellationToken) => Task.CompletedTask;

    public Task StartAsync(CancellationToken cancellationToken)
    {
        if (store.Options.PredictionRetention is { } retention)
        {
            RetentionStarted(retention, store.Options.OutcomeRetention?.ToString() ?? "never", store.Options.PruneInterval, store.Options.PruneBatchSize);
            _retention = Task.Run(() => PruneEveryIntervalAsync(_stopping.Token), CancellationToken.None);
        }

        return Task.CompletedTask;
    }

    public Task StartedAsync(CancellationToken cancellationToken) => Task.CompletedTask;

    public Task StoppingAsync(CancellationToken cancellationToken) => Task.CompletedTask;

    public async Task StopAsync(CancellationToken cancellationToken)
    {
        await _stopping.CancelAsync().ConfigureAwait(false);
        try
        {
            await _retention.WaitAsync(cancellationToken).ConfigureAwait(false);
        }
        catch (OperationCanceledException)
        {
        }
    }

    public async Task StoppedAsync(CancellationToken cancellationToken)
    {
        await store.DisposeAsync().ConfigureAwait(false);
        _stopping.Dispose();
    }

    private async Task PruneEveryIntervalAsync(CancellationToken cancellationToken)
    {
        using var timer = new PeriodicTimer(store.Options.PruneInterval, time);
        do
        {
            try
            {
                if (!await store.TryHoldLeaseAsync(RetentionRules.LeaseName, cancellationToken).ConfigureAwait(false))
                {
                    NotHolder();
                    continue;
                }

                var result = await store.PruneAsync(time.GetUtcNow(), cancellationToken).ConfigureAwait(false);
                _counters.Completed(result, time.GetUtcNow());
                Pruned(result.PredictionsDeleted, result.KeptAwaitingOutcome, result.OutcomesDeleted, result.ConflictsDeleted, result.Batches,
                    result.LongestBatch.TotalMilliseconds);
            }
            catch (OperationCanceledException) when (cancellationToken.IsCancellationRequested)
            {
                return;
            }
#pragma warning disable CA1031 // retried at the next tick
            catch (Exception ex)
#pragma warning restore CA1031
            {
                _counters.Failed();
                PruneFailed(ex, store.Options.PruneInterval);
            }
        }
        while (await timer.WaitForNextTickAsync(cancellationToken).ConfigureAwait(false));
    }

    [LoggerMessage(EventId = Events.RetentionStarted, Level = LogLevel.Information,
        Message = "SQLite store retention: predictions scored more than {Retention} ago are deleted once their outcome is in, outcomes after {OutcomeRetention}, every {Interval}, at most {Batch} rows per transaction, by the holder of the retention lease")]
    private partial void RetentionStarted(TimeSpan retention, string outcomeRetention, TimeSpan interval, int batch);

    [LoggerMessage(EventId = Events.Pruned, Level = LogLevel.Information,
        Message = "SQLite store retention: {Deleted} predictions deleted, {Kept} past the retention kept because their outcome is still expected; {Outcomes} outcomes and {Conflicts} outcome conflicts deleted; {Batches} transactions, the longest {LongestMs:F1} ms")]
    private partial void Pruned(long deleted, long kept, long outcomes, long conflicts, int batches, double longestMs);

    [LoggerMessage(EventId = Events.PruneFailed, Level = LogLevel.Error, Message = "Applying the SQLite store's retention failed; retrying in {Interval}")]
    private partial void PruneFailed(Exception error, TimeSpan interval);

    [LoggerMessage(EventId = Events.NotHolder, Level = LogLevel.Debug,
        Message = "SQLite store retention: another store instance on the file holds the retention lease, so this one does not prune at this tick")]
    private partial void NotHolder();

    /// <summary>The event ids of this service's log events.</summary>
    public static class Events
    {
        public const int RetentionStarted = 2301;
        public const int Pruned = 2302;
        public const int PruneFailed = 2303;
        public const int NotHolder = 2304;
    }
}
