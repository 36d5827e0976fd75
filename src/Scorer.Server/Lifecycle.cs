using Scorer.Monitor.Reporting;
using Scorer.Registry;
using Scorer.Store;
using Scorer.Transport;

namespace Scorer.Server;

/// <summary>
/// Starts the folder watcher and the monitor's charts; on shutdown stops them, drains shadow scoring and the
/// prediction log, closes the store.
/// </summary>
internal sealed class Lifecycle(RegistryWatcher watcher, ShadowScorer shadows, PredictionLog log, IScorerStore store, ChartRunner charts, DriftTracker drift,
    MonitorLoop monitor, StatusWebhook webhook, ILogger<Lifecycle> logger)
    : IHostedService
{
    private readonly CancellationTokenSource _stopping = new();
    private Task _charts = Task.CompletedTask;
    private Task _monitor = Task.CompletedTask;
    private Task _drift = Task.CompletedTask;

    public Task StartAsync(CancellationToken cancellationToken)
    {
        watcher.Start();
        _charts = Task.Run(() => charts.RunAsync(_stopping.Token), CancellationToken.None);
        _monitor = Task.Run(() => monitor.RunAsync(_stopping.Token), CancellationToken.None);
        _drift = Task.Run(() => FlushDriftAsync(_stopping.Token), CancellationToken.None);
        return Task.CompletedTask;
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
        foreach (var loop in new[] { _charts, _monitor, _drift })
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

        await watcher.DisposeAsync().ConfigureAwait(false);
        await shadows.DisposeAsync().ConfigureAwait(false);
        await log.StopAsync().ConfigureAwait(false);
        await store.DisposeAsync().ConfigureAwait(false);
        _stopping.Dispose();
    }
}
