using Microsoft.Extensions.Hosting;
using Microsoft.Extensions.Logging;

namespace Scorer.Store.Postgres;

/// <summary>
/// The PostgreSQL store's background work in the host: the upkeep of the daily partitions and the retention (see
/// <see cref="PostgresScorerStore.PruneAsync"/>), at start and then every <see cref="PostgresStoreOptions.PruneInterval"/>
/// on the host's clock, by the one process among all sharing the database that holds the lease
/// <see cref="RetentionRules.LeaseName"/> (tried at every tick); it runs with or without a retention, since partitions
/// are made ahead either way. Stopped with the host; once the host has stopped (every hosted service's StopAsync
/// returned, the prediction log drained), the store's closing.
/// </summary>
/// <remarks>A failed pass is logged, counted and tried again at the next tick; passes never overlap.</remarks>
public sealed partial class PostgresStoreHost(PostgresScorerStore store, TimeProvider time, ILogger<PostgresStoreHost> logger, RetentionCounters? counters = null)
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
            RetentionStarted(retention, store.Options.PruneInterval);
        }

        _retention = Task.Run(() => PruneEveryIntervalAsync(_stopping.Token), CancellationToken.None);
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
                Partitions(result.PartitionsCreated, result.PartitionsDropped);
                if (store.Options.PredictionRetention is not null)
                {
                    Pruned(result.PredictionsDeleted, result.KeptAwaitingOutcome);
                }

                if (store.Options.OutcomeRetention is not null)
                {
                    OutcomesPruned(result.OutcomesDeleted, result.ConflictsDeleted);
                }
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
        Message = "Prediction log retention: day partitions of predictions scored more than {Retention} ago are dropped once every outcome in them is in, checked every {Interval}")]
    private partial void RetentionStarted(TimeSpan retention, TimeSpan interval);

    [LoggerMessage(EventId = Events.Pruned, Level = LogLevel.Information,
        Message = "Prediction log retention: {Deleted} predictions deleted, {Kept} past the retention kept because their outcome is still expected")]
    private partial void Pruned(long deleted, long kept);

    [LoggerMessage(EventId = Events.PruneFailed, Level = LogLevel.Error, Message = "Applying the prediction log's retention failed; retrying in {Interval}")]
    private partial void PruneFailed(Exception error, TimeSpan interval);

    [LoggerMessage(EventId = Events.Partitions, Level = LogLevel.Information,
        Message = "Store partitions: {Created} day partitions created (ahead, or for rows in a default partition), {Dropped} dropped")]
    private partial void Partitions(int created, int dropped);

    [LoggerMessage(EventId = Events.OutcomesPruned, Level = LogLevel.Information,
        Message = "Outcome retention: {Outcomes} outcomes and {Conflicts} outcome conflicts deleted")]
    private partial void OutcomesPruned(long outcomes, long conflicts);

    [LoggerMessage(EventId = Events.NotHolder, Level = LogLevel.Debug,
        Message = "Store partitions and retention: another process holds the retention lease, so this one leaves them to it at this tick")]
    private partial void NotHolder();

    /// <summary>The event ids of this service's log events.</summary>
    public static class Events
    {
        public const int RetentionStarted = 2101;
        public const int Pruned = 2102;
        public const int PruneFailed = 2103;
        public const int Partitions = 2104;
        public const int OutcomesPruned = 2105;
        public const int NotHolder = 2106;
    }
}
