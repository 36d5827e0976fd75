using Scorer.Monitor.Reporting;
using Scorer.Registry;
using Scorer.Store;
using Scorer.Transport;

namespace Scorer.Host;

/// <summary>
/// Starts the folder watcher and the monitor's charts; on shutdown stops them, drains shadow scoring and the
/// prediction log, closes the store.
/// </summary>
internal sealed class Lifecycle(RegistryWatcher watcher, ShadowScorer shadows, PredictionLog log, IScorerStore store, ChartRunner charts, DriftTracker drift,
    MonitorLoop monitor, StatusWebhook webhook, TimeProvider time, ILogger<Lifecycle> logger)
    : IHostedService
{
    private readonly CancellationTokenSource _stopping = new();
    private Task _charts = Task.CompletedTask;
    private Task _monitor = Task.CompletedTask;
    private Task _drift = Task.CompletedTask;
    private Task _stages = Task.CompletedTask;
    private Task _prune = Task.CompletedTask;

    public Task StartAsync(CancellationToken cancellationToken)
    {
        watcher.Start();
        _charts = Task.Run(() => charts.RunAsync(_stopping.Token), CancellationToken.None);
        _monitor = Task.Run(() => monitor.RunAsync(_stopping.Token), CancellationToken.None);
        _drift = Task.Run(() => FlushDriftAsync(_stopping.Token), CancellationToken.None);
        if (store is IStageChangeSignal signal)
        {
            // Another replica changed a stage: rescan at once instead of at the next turn.
            _stages = Task.Run(() => signal.ListenForStageChangesAsync(_ => watcher.Poke(), _stopping.Token), CancellationToken.None);
        }

        if (store is Scorer.Store.Postgres.PostgresScorerStore postgres && postgres.Options.PredictionRetention is not null)
        {
            _prune = Task.Run(() => PruneAsync(postgres, _stopping.Token), CancellationToken.None);
        }

        return Task.CompletedTask;
    }

    /// <summary>Applies the prediction log's retention every hour (PostgreSQL; see PostgresScorerStore.PruneAsync).</summary>
    private async Task PruneAsync(Scorer.Store.Postgres.PostgresScorerStore postgres, CancellationToken cancellationToken)
    {
        using var timer = new PeriodicTimer(TimeSpan.FromHours(1));
        do
        {
            try
            {
                var result = await postgres.PruneAsync(time.GetUtcNow(), cancellationToken).ConfigureAwait(false);
                logger.LogInformation("Prediction log retention: {Deleted} predictions deleted, {Kept} past the retention kept because their outcome is still expected",
                    result.Deleted, result.KeptAwaitingOutcome);
            }
            catch (OperationCanceledException) when (cancellationToken.IsCancellationRequested)
            {
                return;
            }
#pragma warning disable CA1031 // retried at the next tick
            catch (Exception ex)
#pragma warning restore CA1031
            {
                logger.LogError(ex, "Applying the prediction log's retention failed; retrying in an hour");
            }
        }
        while (await timer.WaitForNextTickAsync(cancellationToken).ConfigureAwait(false));
    }

    /// <summary>Adds the drift counts to the store every second; a failed flush keeps them for the next.</summary>
    private async Task FlushDriftAsync(CancellationToken cancellationToken)
    {
        using var timer = new PeriodicTimer(TimeSpan.FromSeconds(1));
        while (await timer.WaitForNextTickAsync(cancellationToken).ConfigureAwait(false))
        {
            try
            {
                await drift.FlushAsync(cancellationToken).ConfigureAwait(false);
            }
            catch (OperationCanceledException) when (cancellationToken.IsCancellationRequested)
            {
                return;
            }
#pragma warning disable CA1031 // kept and retried at the next tick
            catch (Exception ex)
#pragma warning restore CA1031
            {
                logger.LogError(ex, "Adding the drift counts to the store failed; retrying");
            }
        }
    }

    public async Task StopAsync(CancellationToken cancellationToken)
    {
        await _stopping.CancelAsync().ConfigureAwait(false);
        foreach (var loop in new[] { _charts, _monitor, _drift, _stages, _prune })
        {
            try
            {
                await loop.ConfigureAwait(false);
            }
            catch (OperationCanceledException)
            {
            }
        }

        await webhook.DisposeAsync().ConfigureAwait(false);
        await drift.FlushAsync(CancellationToken.None).ConfigureAwait(false); // what was counted since the last tick
        await store.ReleaseLeaseAsync(ChartRunner.Lease, CancellationToken.None).ConfigureAwait(false); // another replica takes the charts at once

        await watcher.DisposeAsync().ConfigureAwait(false);
        await shadows.DisposeAsync().ConfigureAwait(false);
        await log.StopAsync().ConfigureAwait(false);
        await store.DisposeAsync().ConfigureAwait(false);
        _stopping.Dispose();
    }
}
