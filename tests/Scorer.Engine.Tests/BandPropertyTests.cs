using Scorer.Engine.Scoring;
using Scorer.Engine.Tests.Support;
using Scorer.ModelFile;

namespace Scorer.Engine.Tests;

/// <summary>Properties that hold for every row and link, checked on seeded random rows of the reference models.</summary>
public sealed class BandPropertyTests
{
    public static TheoryData<string> Models() => new() { "birthwt-logit", "birthwt-probit", "birthwt-cloglog", "infert-logit", "infert-probit", "infert-cloglog" };

    [Theory]
    [MemberData(nameof(Models))]
    public void The_band_contains_the_probability_and_widens_with_the_level(string name)
    {
        var model = CompiledModel.Compile(ReferenceData.Model(name));
        var random = new Random(20261201);
        var levels = new[] { 0.5, 0.8, 0.9, 0.95, 0.99, 0.999 };
        for (var n = 0; n < 500; n++)
        {
            var row = RandomRow(model, random);
            double lastLower = double.PositiveInfinity, lastUpper = double.NegativeInfinity;
            foreach (var level in levels)
            {
                var r = model.Score(row, ScoreSettings.WithBand(level));
                Assert.InRange(r.Probability, r.Lower, r.Upper);
                Assert.True(r.Lower <= lastLower && r.Upper >= lastUpper, $"level {level}: [{r.Lower}, {r.Upper}] inside the narrower band [{lastLower}, {lastUpper}]");
                Assert.InRange(r.Lower, 0.0, 1.0);
                Assert.InRange(r.Upper, 0.0, 1.0);
                lastLower = r.Lower;
                lastUpper = r.Upper;
            }
        }
    }

    [Theory]
    [MemberData(nameof(Models))]
    public void Scoring_does_not_depend_on_the_order_of_features_in_a_row(string name)
    {
        var model = CompiledModel.Compile(ReferenceData.Model(name));
        var random = new Random(7);
        for (var n = 0; n < 200; n++)
        {
            var row = RandomRow(model, random);
            var shuffled = row.ToArray();
            random.Shuffle(shuffled);
            var withExtra = shuffled.Append(new NamedValue("not_a_feature", FeatureValue.Of(1.0))).ToArray();
            var a = model.Score(row, ScoreSettings.Default);
            var b = model.Score(withExtra, ScoreSettings.Default);
            Assert.Equal(a.Eta, b.Eta);
            Assert.Equal(a.Se, b.Se);
            Assert.Equal(a.Lower, b.Lower);
        }
    }

    [Theory]
    [MemberData(nameof(Models))]
    public void Contributions_add_up_to_the_linear_predictor_less_that_of_a_typical_row(string name)
    {
        // Contributions are measured from the training means: the listed ones add up to η − η̄, η̄ = β₀ + Σ β_j x̄_j
        // (the linear predictor at the means), the same for every row; without means, to η − β₀.
        var document = ReferenceData.Model(name);
        foreach (var doc in new[] { document, document with { Baseline = document.Baseline! with { TermMeans = System.Collections.Immutable.ImmutableDictionary<string, double>.Empty } } })
        {
            var model = CompiledModel.Compile(doc);
            var beta = model.Coefficients.ToArray();
            var typical = beta[model.InterceptIndex] + model.VaryingTerms.Sum(j => beta[j] * doc.Baseline!.TermMeans.GetValueOrDefault(model.TermNames[j]));
            var random = new Random(11);
            var contributions = new double[model.TermCount];
            for (var n = 0; n < 200; n++)
            {
                var r = model.Score(RandomRow(model, random), ScoreSettings.Default, contributions);
                Assert.Equal(r.Eta - typical, model.VaryingTerms.Sum(j => contributions[j]), 10);
            }
        }
    }

    [Theory]
    [InlineData(LinkKind.Logit)]
    [InlineData(LinkKind.Probit)]
    [InlineData(LinkKind.CLogLog)]
    public void Probability_band_and_delta_se_stay_finite_for_eta_up_to_700_in_size(LinkKind link)
    {
        // One numeric term with slope 1 and variance 4: eta = x, se = 2 |x| ... plus an intercept variance 1.
        var doc = new ModelDocument
        {
            Format = ModelDocument.FormatV1,
            Model = "tails",
            Version = "1",
            Link = link,
            Outcome = new OutcomeSpec("y", "event", "P1D", NegativesPolicy.Explicit),
            Features = [new FeatureSpec { Name = "x", Kind = FeatureKind.Numeric }],
            Terms = [new TermSpec("(intercept)", 0, []), new TermSpec("x", 1, [new FactorSpec { Feature = "x" }])],
            Covariance = [[1.0, 0.0], [0.0, 4.0]],
        };
        var model = CompiledModel.Compile(doc);
        for (var eta = -700.0; eta <= 700.0; eta += 3.5)
        {
            var r = model.Score([new NamedValue("x", eta)], ScoreSettings.WithBand(0.999));
            Assert.True(double.IsFinite(r.Probability) && double.IsFinite(r.Lower) && double.IsFinite(r.Upper) && double.IsFinite(r.ProbabilitySe), $"eta {eta}: {r.Probability} [{r.Lower}, {r.Upper}] se(p) {r.ProbabilitySe}");
            Assert.InRange(r.Probability, 0.0, 1.0);
            Assert.InRange(r.Probability, r.Lower, r.Upper);
            Assert.True(r.ProbabilitySe >= 0);
        }
    }

    private static NamedValue[] RandomRow(CompiledModel model, Random random)
    {
        var doc = model.Document;
        return doc.Features.Select(f => new NamedValue(f.Name, f.Kind == FeatureKind.Numeric
            ? FeatureValue.Of(RandomIn(random, f) is var v && NeedsPositive(doc, f.Name) ? Math.Max(v, 1e-3) : v)
            : FeatureValue.Of(f.Levels[random.Next(f.Levels.Length)]))).ToArray();
    }

    private static double RandomIn(Random random, FeatureSpec f)
    {
        // 20% beyond each end of the training range, to include extrapolation.
        var lo = f.Min ?? -1;
        var hi = f.Max ?? 1;
        var width = hi - lo;
        return Math.Max(0, lo - 0.2 * width + random.NextDouble() * 1.4 * width);
    }

    private static bool NeedsPositive(ModelDocument doc, string feature) =>
        doc.Terms.SelectMany(t => t.Factors).Any(x => x.Feature == feature && x.Transform == TransformKind.Log);
}
