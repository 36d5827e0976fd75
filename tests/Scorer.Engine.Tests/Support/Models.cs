using System.Collections.Immutable;
using Scorer.ModelFile;

namespace Scorer.Engine.Tests.Support;

/// <summary>Small invented models for behaviour tests.</summary>
internal static class Models
{
    /// <summary>logit: intercept, log(vibration), (temp − 55)/10, site=east, site=river, log(vibration):site=river.</summary>
    public static ModelDocument Pump(MissingPolicy tempMissing = MissingPolicy.Mean, UnknownLevelPolicy unknown = UnknownLevelPolicy.Reject,
        SamplingSpec? sampling = null, double? threshold = 0.2, double? maxSe = null) => new()
    {
        Format = ModelDocument.FormatV1,
        Model = "pump",
        Version = "1",
        Link = LinkKind.Logit,
        Outcome = new OutcomeSpec("failed", "failure within 30 days", "P30D", NegativesPolicy.Implicit),
        Features =
        [
            new FeatureSpec { Name = "vibration", Kind = FeatureKind.Numeric, Min = 0.5, Max = 12 },
            new FeatureSpec { Name = "temp", Kind = FeatureKind.Numeric, Min = 30, Max = 80, Missing = tempMissing, Mean = 55 },
            new FeatureSpec { Name = "site", Kind = FeatureKind.Categorical, Levels = ["north", "east", "river"], Reference = "north", Unknown = unknown },
        ],
        Terms =
        [
            new TermSpec("(intercept)", -3, []),
            new TermSpec("log(vibration)", 0.8, [new FactorSpec { Feature = "vibration", Transform = TransformKind.Log }]),
            new TermSpec("temp", 0.3, [new FactorSpec { Feature = "temp", Center = 55, Scale = 10 }]),
            new TermSpec("site=east", 0.2, [new FactorSpec { Feature = "site", Level = "east" }]),
            new TermSpec("site=river", 0.5, [new FactorSpec { Feature = "site", Level = "river" }]),
            new TermSpec("log(vibration):site=river", 0.25, [new FactorSpec { Feature = "vibration", Transform = TransformKind.Log }, new FactorSpec { Feature = "site", Level = "river" }]),
        ],
        Covariance = Diagonal(6, 0.01),
        Threshold = threshold,
        Sampling = sampling,
        Baseline = maxSe is { } m ? new BaselineSpec { N = 1000, Events = 60, MaxSe = m } : null,
    };

    public static System.Collections.Immutable.ImmutableArray<System.Collections.Immutable.ImmutableArray<double>> Diagonal(int k, double v) =>
        [.. Enumerable.Range(0, k).Select(i => Enumerable.Range(0, k).Select(j => i == j ? v : 0.0).ToImmutableArray())];
}
