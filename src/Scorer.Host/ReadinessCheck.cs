using Microsoft.Extensions.Diagnostics.HealthChecks;
using Scorer.Registry;
using Scorer.Store;

namespace Scorer.Host;

/// <summary>
/// Ready when models are loaded and the prediction log is not close to its bound. A store that does not answer, or that
/// refuses writes for lack of space (an <see cref="IStoreSpaceSignal"/> its driver registered), makes the service degraded, not unready:
/// scoring goes on (the log keeps the rows, up to its bound, and writes them when the store is back), while outcome
/// reports and stage changes are refused, since they are acknowledged only once stored. Only when the log nears its bound does readiness fail, so that traffic moves to replicas that can keep
/// their rows.
/// </summary>
internal sealed class ReadinessCheck(ModelRegistry registry, IStageStore store, IEnumerable<IStoreSpaceSignal> space, PredictionLog log) : IHealthCheck
{
    public async Task<(bool Ready, IReadOnlyList<string> Reasons)> EvaluateAsync(CancellationToken cancellationToken = default)
    {
        var (ready, _, reasons) = await CheckAsync(cancellationToken).ConfigureAwait(false);
        return (ready, reasons);
    }

    /// <summary>Ready or not, degraded or not, and the reasons of either.</summary>
    public async Task<(bool Ready, bool Degraded, IReadOnlyList<string> Reasons)> CheckAsync(CancellationToken cancellationToken = default)
    {
        var reasons = new List<string>();
        var degradations = 0;
        if (registry.Current.Generation == 0)
        {
            reasons.Add("models not loaded yet");
        }
        else if (registry.Current.Models.Count == 0)
        {
            reasons.Add("no model is loaded");
        }

        try
        {
            await store.GetVersionsAsync(cancellationToken).ConfigureAwait(false);
        }
#pragma warning disable CA1031 // any store failure means not ready
        catch (Exception ex)
#pragma warning restore CA1031
        {
            reasons.Add("degraded: store unreachable (scoring goes on, rows wait in the prediction log; outcomes and stage changes are refused): " + ex.Message);
            degradations++;
        }

        if (log.Enabled && log.Stalled)
        {
            // Rows wait and no write succeeds: the store is down (said above), or the writer cannot get rows through.
            reasons.Add($"degraded: prediction log not draining ({log.Pending} rows waiting, none written for {log.Waiting.TotalSeconds:0} s; "
                + $"{log.FailedWrites} failed writes, {log.SetAside} rows set aside since start)");
            degradations++;
        }

        // Reads go on when the disk is full, so the probe above does not notice; the store says when its writes are refused.
        foreach (var full in space.Select(s => s.Full).OfType<StoreFull>())
        {
            reasons.Add($"degraded: store full since {full.Since:yyyy-MM-ddTHH:mm:ssZ}, writes refused for lack of space (scoring goes on, rows wait in the "
                + "prediction log; outcomes and stage changes may be refused): " + full.Reason);
            degradations++;
        }

        var degraded = degradations > 0;
        var ready = reasons.Count == degradations;
        if (log.Enabled && log.Depth >= log.Capacity * 0.9)
        {
            reasons.Add($"prediction log nearly full ({log.Depth} of {log.Capacity} rows waiting)");
            ready = false;
        }

        return (ready, degraded, reasons);
    }

    public async Task<HealthCheckResult> CheckHealthAsync(HealthCheckContext context, CancellationToken cancellationToken = default)
    {
        var (ready, degraded, reasons) = await CheckAsync(cancellationToken).ConfigureAwait(false);
        return !ready ? HealthCheckResult.Unhealthy(string.Join("; ", reasons))
            : degraded ? HealthCheckResult.Degraded(string.Join("; ", reasons))
            : HealthCheckResult.Healthy();
    }
}
