using Microsoft.Extensions.Hosting;

namespace Scorer.Store.Sqlite;

/// <summary>
/// The SQLite store's part in the host's life: it has no background work of its own; once the host has stopped (every
/// hosted service's StopAsync has returned, the prediction log drained), it closes the store, giving up its leases.
/// </summary>
internal sealed class SqliteStoreHost(SqliteScorerStore store) : IHostedLifecycleService
{
    public Task StartingAsync(CancellationToken cancellationToken) => Task.CompletedTask;

    public Task StartAsync(CancellationToken cancellationToken) => Task.CompletedTask;

    public Task StartedAsync(CancellationToken cancellationToken) => Task.CompletedTask;

    public Task StoppingAsync(CancellationToken cancellationToken) => Task.CompletedTask;

    public Task StopAsync(CancellationToken cancellationToken) => Task.CompletedTask;

    public async Task StoppedAsync(CancellationToken cancellationToken) => await store.DisposeAsync().ConfigureAwait(false);
}
