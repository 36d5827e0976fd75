using System.Collections.Concurrent;
using Microsoft.Extensions.Logging;
using Scorer.Registry;
using Scorer.Store;

namespace Scorer.Monitor.Reporting;

/// <summary>
/// Reports every live and shadow version over every window, every <see cref="MonitorOptions.ReportInterval"/>, and
/// keeps the latest: the metrics, the page's overview and the event streams read them, so a scrape or a page view never
/// computes a report itself. Status changes are judged (and logged) as a side effect of each round.
/// </summary>
public sealed class MonitorLoop(ModelRegistry registry, MonitorReporter reporter, LabelledCache labelled, MonitorOptions options, TimeProvider time, ILogger<MonitorLoop> logger)
{
    private readonly ConcurrentDictionary<(string Model, string Version, string Window), MonitorSnapshot> _latest = new();

    /// <summary>Raised after each new snapshot.</summary>
    public event Action<MonitorSnapshot>? Updated;

    /// <summary>The latest snapshots, one per live or shadow version and window.</summary>
    public IReadOnlyCollection<MonitorSnapshot> Latest => [.. _latest.Values];

    public MonitorSnapshot? Find(string model, string version, string window) => _latest.TryGetValue((model, version, window), out var s) ? s : null;

    public async Task RunAsync(CancellationToken cancellationToken)
    {
        using var timer = new PeriodicTimer(options.ReportInterval, time);
        do
        {
            try
            {
                await RefreshAsync(cancellationToken).ConfigureAwait(false);
            }
            catch (OperationCanceledException) when (cancellationToken.IsCancellationRequested)
            {
                return;
            }
#pragma warning disable CA1031 // the loop keeps going; the failure is logged and retried next round
            catch (Exception ex)
#pragma warning restore CA1031
            {
                MonitorLoopEvents.RefreshFailed(logger, ex);
            }
        }
        while (await timer.WaitForNextTickAsync(cancellationToken).ConfigureAwait(false));
    }

    /// <summary>One round over every version and window.</summary>
    public async Task RefreshAsync(CancellationToken cancellationToken = default)
    {
        var current = registry.Current;
        foreach (var key in _latest.Keys)
        {
            if (current.Find(key.Model)?.Find(key.Version) is not { Stage: not Stage.Retired })
            {
                _latest.TryRemove(key, out _);
            }
        }

        bool Serving(string model, string version) => current.Find(model)?.Find(version) is { Stage: not Stage.Retired };
        labelled.Retain(Serving);
        reporter.Retain(Serving);

        foreach (var version in current.Models.Values.SelectMany(m => m.Versions).Where(v => v.Stage != Stage.Retired))
        {
            foreach (var window in options.Windows.Keys)
            {
                cancellationToken.ThrowIfCancellationRequested();
                var snapshot = await reporter.ReportAsync(version, window, cancellationToken).ConfigureAwait(false);
                _latest[(version.Model, version.Version, window)] = snapshot;
                Updated?.Invoke(snapshot);
            }
        }
    }
}

/// <summary>The log events of this file, with their event ids (docs/operations.md lists them).</summary>
internal static partial class MonitorLoopEvents
{
    [LoggerMessage(EventId = 3301, Level = LogLevel.Error, Message = "The monitor's reports could not be refreshed; retrying")]
    public static partial void RefreshFailed(ILogger logger, Exception error);
}
