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
    MonitorLoop monitor, StatusWebhook webhook)
    : IHostedService
{
    private readonly CancellationTokenSource _stopping = new();
    private Task _charts = Task.CompletedTask;
    private Task _monitor = Task.CompletedTask;

    public Task StartAsync(CancellationToken cancellationToken)
    {
        log.DriftCounter = drift.Count;
        watcher.Start();
        _charts = Task.Run(() => charts.RunAsync(_stopping.Token), CancellationToken.None);
        _monitor = Task.Run(() => monitor.RunAsync(_stopping.Token), CancellationToken.None);
        return Task.CompletedTask;
    }

    public async Task StopAsync(CancellationToken cancellationToken)
    {
        await _stopping.CancelAsync().ConfigureAwait(false);
        foreach (var loop in new[] { _charts, _monitor })
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

        await watcher.DisposeAsync().ConfigureAwait(false);
        await shadows.DisposeAsync().ConfigureAwait(false);
        await log.StopAsync().ConfigureAwait(false);
        await store.DisposeAsync().ConfigureAwait(false);
        _stopping.Dispose();
    }
}
