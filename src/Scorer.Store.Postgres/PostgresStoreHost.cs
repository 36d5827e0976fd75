using Microsoft.Extensions.Hosting;
using Microsoft.Extensions.Logging;

namespace Scorer.Store.Postgres;

/// <summary>
/// The PostgreSQL store's background work in the host: the prediction log's retention, applied at start and then
/// every <see cref="PostgresStoreOptions.PruneInterval"/> on the host's clock (only when the store has a retention;
/// see <see cref="PostgresScorerStore.PruneAsync"/>), stopped with the host; once the host has stopped (every hosted
/// service's StopAsync returned, the prediction log drained), the store's closing.
/// </summary>
/// <remarks>A failed pass is logged and tried again at the next tick; passes never overlap.</remarks>
public sealed partial class PostgresStoreHost(PostgresScorerStore store, TimeProvider time, ILogger<PostgresStoreHost> logger) : IHostedLifecycleService
{
    private readonly CancellationTokenSource _stopping = new();
    private Task _retention = Task.CompletedTask;

    public Task StartingAsync(CancellationToken cancellationToken) => Task.CompletedTask;

    public Task StartAsync(CancellationToken cancellationToken)
    {
        if (store.Options.PredictionRetention is { } retention)
        {
            RetentionStarted(retention, store.Options.PruneInterval);
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
                var result = await store.PruneAsync(time.GetUtcNow(), cancellationToken).ConfigureAwait(false);
                Pruned(result.PredictionsDeleted, result.KeptAwaitingOutcome);
            }
            catch (OperationCanceledException) when (cancellationToken.IsCancellationRequested)
            {
                return;
            }
#pragma warning disable CA1031 // retried at the next tick
            catch (Exception ex)
#pragma warning restore CA1031
            {
                PruneFailed(ex, store.Options.PruneInterval);
            }
        }
        while (await timer.WaitForNextTickAsync(cancellationToken).ConfigureAwait(false));
    }

    [LoggerMessage(EventId = Events.RetentionStarted, Level = LogLevel.Information,
        Message = "Prediction log retention: predictions scored more than {Retention} ago are deleted once their outcome is in, every {Interval}")]
    private partial void RetentionStarted(TimeSpan retention, TimeSpan interval);

    [LoggerMessage(EventId = Events.Pruned, Level = LogLevel.Information,
        Message = "Prediction log retention: {Deleted} predictions deleted, {Kept} past the retention kept because their outcome is still expected")]
    private partial void Pruned(long deleted, long kept);

    [LoggerMessage(EventId = Events.PruneFailed, Level = LogLevel.Error, Message = "Applying the prediction log's retention failed; retrying in {Interval}")]
    private partial void PruneFailed(Exception error, TimeSpan interval);

    /// <summary>The event ids of this service's log events.</summary>
    public static class Events
    {
        public const int RetentionStarted = 2101;
        public const int Pruned = 2102;
        public const int PruneFailed = 2103;
    }
}
