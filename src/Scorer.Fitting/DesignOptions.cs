using Scorer.ModelFile;

namespace Scorer.Fitting;

/// <summary>
/// The design as `scorer fit` options give it: numeric and categorical features, transforms, centring, interactions and
/// reference levels. <see cref="DesignBuilder"/> turns it, with the data, into features and terms.
/// </summary>
public sealed record DesignOptions
{
    public IReadOnlyList<string> Numeric { get; init; } = [];
    public IReadOnlyList<string> Categorical { get; init; } = [];

    /// <summary>Interactions as feature names joined by ':' (<c>vibration:site</c>).</summary>
    public IReadOnlyList<string> Interactions { get; init; } = [];

    /// <summary>Transform per numeric feature (default identity).</summary>
    public IReadOnlyDictionary<string, TransformKind> Transforms { get; init; } = new Dictionary<string, TransformKind>();

    /// <summary>Reference level per categorical feature (default: the first level in ordinal sorted order).</summary>
    public IReadOnlyDictionary<string, string> References { get; init; } = new Dictionary<string, string>();

    /// <summary>Centre every numeric factor at the training mean of its transformed value.</summary>
    public bool Center { get; init; }

    public bool Intercept { get; init; } = true;
}

/// <summary>
/// A design taken from a model file (<c>--spec</c> or <c>--like</c>): its features (names, types, levels, reference,
/// policies) and terms (factors, names); coefficients, covariance and training ranges are ignored and refitted.
/// </summary>
public sealed record DesignTemplate(IReadOnlyList<FeatureSpec> Features, IReadOnlyList<TermSpec> Terms);
