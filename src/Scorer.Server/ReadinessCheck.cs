using Microsoft.Extensions.Diagnostics.HealthChecks;
using Scorer.Registry;
using Scorer.Store;

namespace Scorer.Server;

/// <summary>Ready when models are loaded, the store answers, and the prediction log is not overflowing.</summary>
internal sealed class ReadinessCheck(ModelRegistry registry, IScorerStore store, PredictionLog log) : IHealthCheck
{
    public async Task<(bool Ready, IReadOnlyList<string> Reasons)> EvaluateAsync(CancellationToken cancellationToken = default)
    {
        var reasons = new List<string>();
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
            reasons.Add("store unreachable: " + ex.Message);
        }

        if (log.Enabled && log.Depth >= log.Capacity * 0.9)
        {
            reasons.Add($"prediction log nearly full ({log.Depth} of {log.Capacity} rows waiting)");
        }

        return (reasons.Count == 0, reasons);
    }

    public async Task<HealthCheckResult> CheckHealthAsync(HealthCheckContext context, CancellationToken cancellationToken = default)
    {
        var (ready, reasons) = await EvaluateAsync(cancellationToken).ConfigureAwait(false);
        return ready ? HealthCheckResult.Healthy() : HealthCheckResult.Unhealthy(string.Join("; ", reasons));
    }
}
