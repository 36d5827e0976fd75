namespace Scorer.Application;

/// <summary>Limits on what one request may carry, and on what callers may hold open. Each has a documented default.</summary>
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
}
