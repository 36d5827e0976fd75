using Microsoft.Extensions.Logging;

namespace Scorer.Registry;

/// <summary>
/// Keeps the registry in step with its folder: a file watcher triggers a reload at once, and a periodic rescan catches
/// what watchers miss (network volumes, ConfigMap symlink swaps). New or changed files serve within the rescan interval.
/// Each turn also reads the stages from the store, so a stage change made by another process sharing the store is
/// served within the rescan interval; <see cref="Poke"/> starts a turn at once (a store notification calls it).
/// </summary>
public sealed class RegistryWatcher(ModelRegistry registry, RegistryOptions options, TimeProvider time, ILogger<RegistryWatcher> logger) : IAsyncDisposable
{
    private readonly CancellationTokenSource _stop = new();
    private readonly SemaphoreSlim _poke = new(0, 1);
    private FileSystemWatcher? _watcher;
    private Task? _loop;
    private int _disposed;

    /// <summary>How often the folder is rescanned without a watcher event. Default 1 s.</summary>
    public TimeSpan RescanInterval { get; init; } = TimeSpan.FromSeconds(1);

    public void Start()
    {
        if (Directory.Exists(options.ModelsPath))
        {
            _watcher = new FileSystemWatcher(options.ModelsPath, "*.json") { IncludeSubdirectories = true, EnableRaisingEvents = true };
            _watcher.Created += (_, _) => Poke();
            _watcher.Changed += (_, _) => Poke();
            _watcher.Renamed += (_, _) => Poke();
            _watcher.Deleted += (_, _) => Poke();
        }

        _loop = Task.Run(() => LoopAsync(_stop.Token));
    }

    public async ValueTask DisposeAsync()
    {
        if (Interlocked.Exchange(ref _disposed, 1) == 1)
        {
            return;
        }

        await _stop.CancelAsync().ConfigureAwait(false);
        _watcher?.Dispose();
        if (_loop is not null)
        {
            try
            {
                await _loop.ConfigureAwait(false);
            }
            catch (OperationCanceledException)
            {
            }
        }

        _stop.Dispose();
    }

    /// <summary>Starts a turn now (folder and stages), e.g. when the store says another process changed a stage.</summary>
    public void Poke()
    {
        if (_poke.CurrentCount == 0)
        {
            try
            {
                _poke.Release();
            }
            catch (SemaphoreFullException)
            {
            }
        }
    }

    private async Task LoopAsync(CancellationToken stop)
    {
        while (!stop.IsCancellationRequested)
        {
            await _poke.WaitAsync(RescanInterval, stop).ConfigureAwait(false);
            try
            {
                // Stages first (another process sharing the store may have promoted a version), then the folder, after
                // letting a writer finish the file it is writing.
                await registry.RefreshStagesAsync(stop).ConfigureAwait(false);
                await Task.Delay(TimeSpan.FromMilliseconds(100), time, stop).ConfigureAwait(false);
                await registry.ReloadAsync(stop).ConfigureAwait(false);
            }
            catch (OperationCanceledException) when (stop.IsCancellationRequested)
            {
                return;
            }
#pragma warning disable CA1031 // a failed scan is logged and retried on the next turn; it must not stop the watcher
            catch (Exception ex)
#pragma warning restore CA1031
            {
                RegistryWatcherEvents.RescanFailed(logger, ex, options.ModelsPath);
            }
        }
    }
}

/// <summary>The log events of this file, with their event ids (docs/operations.md lists them).</summary>
internal static partial class RegistryWatcherEvents
{
    [LoggerMessage(EventId = 6201, Level = LogLevel.Error, Message = "Rescan of {Folder} failed; retrying")]
    public static partial void RescanFailed(ILogger logger, Exception error, string folder);
}
