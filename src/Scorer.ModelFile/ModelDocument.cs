using System.Collections.Immutable;
using System.Text.Json;

namespace Scorer.ModelFile;

/// <summary>A model file of format <c>scorer.model/1</c>, as read and validated. Immutable.</summary>
public sealed record ModelDocument
{
    public const string FormatV1 = "scorer.model/1";

    /// <summary>
    /// The name of the linear predictor's distribution: <c>baseline.linear_predictor</c> in the file, the drift series
    /// and PSI of η in reports and metrics. No feature may take it.
    /// </summary>
    public const string LinearPredictorSeries = "linear_predictor";

    public required string Format { get; init; }
    public required string Model { get; init; }
    public required string Version { get; init; }
    public string? Description { get; init; }
    public required LinkKind Link { get; init; }
    public required OutcomeSpec Outcome { get; init; }
    public required ImmutableArray<FeatureSpec> Features { get; init; }
    public required ImmutableArray<TermSpec> Terms { get; init; }

    /// <summary>Row-major covariance of the coefficients in term order, or null when the file has none.</summary>
    public ImmutableArray<ImmutableArray<double>>? Covariance { get; init; }

    /// <summary>Decision threshold on the probability; rows at or above it are flagged.</summary>
    public double? Threshold { get; init; }

    public SamplingSpec? Sampling { get; init; }
    public BaselineSpec? Baseline { get; init; }

    /// <summary>The free-form <c>fit</c> section, kept as written.</summary>
    public JsonElement? Fit { get; init; }

    /// <summary>Fields whose names start with <c>x-</c>, kept as written.</summary>
    public ImmutableDictionary<string, JsonElement> Extensions { get; init; } = ImmutableDictionary<string, JsonElement>.Empty;
}

public enum LinkKind
{
    Logit,
    Probit,
    CLogLog,
}

public enum NegativesPolicy
{
    /// <summary>Both outcomes are reported.</summary>
    Explicit,

    /// <summary>Only positives are reported; no positive within the horizon counts as 0.</summary>
    Implicit,
}

/// <summary>What the model predicts: a 1 means <see cref="Positive"/> within <see cref="Horizon"/> (ISO 8601) of the prediction.</summary>
public sealed record OutcomeSpec(string Name, string Positive, string Horizon, NegativesPolicy Negatives)
{
    /// <summary>The horizon as a time span (a month counts as 30 days, a year as 365); zero when the text is not a valid duration.</summary>
    public TimeSpan HorizonSpan => Validation.Iso8601Duration.TryParse(Horizon, out var span) ? span : TimeSpan.Zero;
}

public enum FeatureKind
{
    Numeric,
    Categorical,
}

public enum MissingPolicy
{
    Reject,
    Mean,
}

public enum UnknownLevelPolicy
{
    Reject,
    Reference,
}

public sealed record FeatureSpec
{
    public required string Name { get; init; }
    public required FeatureKind Kind { get; init; }
    public string? Description { get; init; }

    /// <summary>Training range of a numeric feature.</summary>
    public double? Min { get; init; }

    public double? Max { get; init; }

    /// <summary>Levels of a categorical feature in their declared order.</summary>
    public ImmutableArray<string> Levels { get; init; } = [];

    public string? Reference { get; init; }
    public MissingPolicy Missing { get; init; } = MissingPolicy.Reject;

    /// <summary>Value imputed for a missing numeric value when <see cref="Missing"/> is <see cref="MissingPolicy.Mean"/>.</summary>
    public double? Mean { get; init; }

    public UnknownLevelPolicy Unknown { get; init; } = UnknownLevelPolicy.Reject;
}

public enum TransformKind
{
    Identity,
    Log,
    Log1P,
    Sqrt,
}

public sealed record TermSpec(string Name, double Coefficient, ImmutableArray<FactorSpec> Factors)
{
    public bool IsIntercept => Factors.IsEmpty;
}

/// <summary>
/// A factor of a term: either a numeric factor <c>(transform(x) - center) / scale</c>, or a treatment-coded indicator
/// that is 1 when the row's level equals <see cref="Level"/>.
/// </summary>
public sealed record FactorSpec
{
    public required string Feature { get; init; }
    public string? Level { get; init; }
    public TransformKind Transform { get; init; } = TransformKind.Identity;
    public double Center { get; init; }
    public double Scale { get; init; } = 1.0;

    public bool IsIndicator => Level is not null;
}

public sealed record SamplingSpec(double TrainingEventRate, double PopulationEventRate);

/// <summary>Bins <c>(-inf, e1], (e1, e2], ..., (ek, +inf)</c> with the training proportion of each.</summary>
public sealed record BinnedBaseline(ImmutableArray<double> Edges, ImmutableArray<double> Proportions);

public sealed record BaselineSpec
{
    public required long N { get; init; }
    public required long Events { get; init; }
    public BinnedBaseline? LinearPredictor { get; init; }
    public double? MaxSe { get; init; }
    public ImmutableDictionary<string, BinnedBaseline> Numeric { get; init; } = ImmutableDictionary<string, BinnedBaseline>.Empty;
    public ImmutableDictionary<string, ImmutableDictionary<string, double>> Levels { get; init; } =
        ImmutableDictionary<string, ImmutableDictionary<string, double>>.Empty;

    /// <summary>
    /// The mean over the training rows of each term's value (a column of the design; terms without factors, the
    /// intercept, are left out), by term name; empty when the file gives none. Contributions are then reported
    /// relative to a typical row: β_j (x_j − x̄_j).
    /// </summary>
    public ImmutableDictionary<string, double> TermMeans { get; init; } = ImmutableDictionary<string, double>.Empty;
}
