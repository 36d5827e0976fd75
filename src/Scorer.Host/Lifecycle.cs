using Scorer.Monitor.Reporting;
using Scorer.Registry;
using Scorer.Store;
using Scorer.Transport;

namespace Scorer.Host;

/// <summary>
/// Starts the folder watcher, shadow scoring, the monitor's charts, the drift counts' flush and the stores' stage-change signals; on
/// shutdown stops them, gives up the charts' lease, and drains shadow scoring and the prediction log. The store
/// driver's own background work (retention) and the store's closing, after all this, belong to the driver's hosted
/// service (<c>AddSqliteStore</c>, <c>AddPostgresStore</c>).
/// </summary>
internal sealed partial class Lifecycle(RegistryWatcher watcher, ShadowScorer shadows, PredictionLog log, ILeaseStore leases,
    IEnumerable<IStageChangeSignal> stageSignals, ChartRunner charts, SummaryWriter summaries, DriftTracker drift, MonitorLoop monitor, StatusWebhook webhook, TimeProvider time,
    ILogger<Lifecycle> logger)
    : IHostedService
{
    /// <summary>How often the drift counts are added to the store.</summary>
    internal static readonly TimeSpan DriftFlushInterval = TimeSpan.FromSeconds(1);

    private readonly CancellationTokenSource _stopping = new();
    private readonly List<Task> _loops = [];

    public Task StartAsync(CancellationToken cancellationToken)
    {
        watcher.Start();
        shadows.Start();
        _loops.Add(Task.Run(() => charts.RunAsync(_stopping.Token), CancellationToken.None));
        _loops.Add(Task.Run(() => summaries.RunAsync(_stopping.Token), CancellationToken.None));
        _loops.Add(Task.Run(() => monitor.RunAsync(_stopping.Token), CancellationToken.None));
        _loops.Add(Task.Run(() => FlushDriftAsync(_stopping.Token), CancellationToken.None));
        foreach (var signal in stageSignals)
        {
            // Another replica changed a stage: rescan at once instead of at the next turn.
            _loops.Add(Task.Run(() => signal.ListenForStageChangesAsync(_ => watcher.Poke(), _stopping.Token), CancellationToken.None));
        }

        return Task.CompletedTask;
    }

    /// <summary>Adds the drift counts to the store every <see cref="DriftFlushInterval"/> (on the injected clock); a failed flush keeps them for the next.</summary>
    private async Task FlushDriftAsync(CancellationToken cancellationToken)
    {
        using var timer = new PeriodicTimer(DriftFlushInterval, time);
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
                DriftFlushFailed(ex);
            }
        }
    }

    public async Task StopAsync(CancellationToken cancellationToken)
    {
        await _stopping.CancelAsync().ConfigureAwait(false);
        foreach (var loop in _loops)
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
        await leases.ReleaseLeaseAsync(ChartRunner.Lease, CancellationToken.None).ConfigureAwait(false); // another replica takes the charts at once
        await leases.ReleaseLeaseAsync(SummaryWriter.Lease, CancellationToken.None).ConfigureAwait(false);

        await watcher.DisposeAsync().ConfigureAwait(false);
        await shadows.DisposeAsync().ConfigureAwait(false);
        await log.StopAsync().ConfigureAwait(false);
        _stopping.Dispose();
    }

    [LoggerMessage(EventId = 1101, Level = LogLevel.Error, Message = "Adding the drift counts to the store failed; retrying")]
    private partial void DriftFlushFailed(Exception error);
}
