namespace Scorer.Application;

/// <summary>
/// Limits on what one request may carry, on what callers may hold open, and on what the process keeps in memory for
/// work it has accepted. Each has a documented default (docs/operations.md, "Memory bounds").
/// </summary>
public sealed record ScoringLimits
{
    /// <summary>Rows per request message. Default 10,000.</summary>
    public int MaxRows { get; init; } = 10_000;

    /// <summary>Fields per row. Default 1,000.</summary>
    public int MaxFeaturesPerRow { get; init; } = 1_000;

    /// <summary>Characters in a level, a key or a feature name. Default 256.</summary>
    public int MaxStringLength { get; init; } = 256;

    /// <summary>Values in one dense message. Default 10,000,000.</summary>
    public int MaxDenseValues { get; init; } = 10_000_000;

    /// <summary>Event streams open at once (monitor events over SSE and gRPC, overview events). Default 500.</summary>
    public int MaxEventSubscribers { get; init; } = 500;

    /// <summary>Batches (one per score message of a live version with shadows) waiting for shadow scoring. Default 10,000.</summary>
    public int ShadowQueueBatches { get; init; } = 10_000;

    /// <summary>Rows in those batches together. Default 200,000; at least <see cref="MaxRows"/>, so one full message fits.</summary>
    public int ShadowQueueRows { get; init; } = 200_000;

    /// <summary>Drift tallies (one per version and hour of scoring) held until the store has taken them. Default 10,000.</summary>
    public int MaxDriftTallies { get; init; } = 10_000;

    /// <summary>Live and shadow versions that get metric series of their own (rows scored, the monitor's gauges). Default 200.</summary>
    public int MaxMetricVersions { get; init; } = 200;

    /// <summary>Status changes waiting to be posted to the webhook (Scorer:Monitor:Webhook); beyond it the oldest is dropped. Default 1,000.</summary>
    public int StatusWebhookNotices { get; init; } = 1_000;

    private const string Section = "Scorer:Limits:";

    /// <summary>Every problem of these limits, each naming its setting.</summary>
    public IReadOnlyList<string> Validate()
    {
        var problems = new List<string>();
        foreach (var (name, value) in new[]
                 {
                     (nameof(MaxRows), MaxRows), (nameof(MaxFeaturesPerRow), MaxFeaturesPerRow), (nameof(MaxStringLength), MaxStringLength),
                     (nameof(MaxDenseValues), MaxDenseValues), (nameof(MaxEventSubscribers), MaxEventSubscribers),
                     (nameof(ShadowQueueBatches), ShadowQueueBatches), (nameof(ShadowQueueRows), ShadowQueueRows),
                     (nameof(MaxDriftTallies), MaxDriftTallies), (nameof(MaxMetricVersions), MaxMetricVersions),
                     (nameof(StatusWebhookNotices), StatusWebhookNotices),
                 })
        {
            if (value < 1)
            {
                problems.Add($"{Section}{name} is {value}; give at least 1");
            }
        }

        if (ShadowQueueRows >= 1 && ShadowQueueRows < MaxRows)
        {
            problems.Add($"Scorer:Limits:ShadowQueueRows is {ShadowQueueRows}, below Scorer:Limits:MaxRows ({MaxRows}); a full message could never be shadowed: give at least {MaxRows}");
        }

        return problems;
    }
}
