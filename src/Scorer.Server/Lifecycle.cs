using Scorer.Registry;
using Scorer.Store;
using Scorer.Transport;

namespace Scorer.Server;

/// <summary>Starts the folder watcher; on shutdown stops it, drains shadow scoring and the prediction log, closes the store.</summary>
internal sealed class Lifecycle(RegistryWatcher watcher, ShadowScorer shadows, PredictionLog log, IScorerStore store) : IHostedService
{
    public Task StartAsync(CancellationToken cancellationToken)
    {
        watcher.Start();
        return Task.CompletedTask;
    }

    public async Task StopAsync(CancellationToken cancellationToken)
    {
        await watcher.DisposeAsync().ConfigureAwait(false);
        await shadows.DisposeAsync().ConfigureAwait(false);
        await log.StopAsync().ConfigureAwait(false);
        await store.DisposeAsync().ConfigureAwait(false);
    }
}
