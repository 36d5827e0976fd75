using System.Collections.Immutable;
using Scorer.Engine;
using Scorer.Engine.Scoring;
using Scorer.ModelFile;

namespace Scorer.Bench;

/// <summary>
/// The benchmark model: 20 terms = intercept, 12 numeric terms over 10 features (two log-transformed, all centred and
/// scaled), 4 indicators of a 5-level categorical, 3 numeric × level interactions; a dense positive definite covariance.
/// Rows are random but seeded; invented values.
/// </summary>
internal static class BenchModel
{
    public const int Rows = 4096;
    public static readonly string[] Levels = ["a", "b", "c", "d", "e"];

    public static ModelDocument Document()
    {
        var features = new List<FeatureSpec>();
        for (var i = 0; i < 10; i++)
        {
            features.Add(new FeatureSpec { Name = $"x{i}", Kind = FeatureKind.Numeric, Min = 0.1, Max = 10 });
        }

        features.Add(new FeatureSpec { Name = "group", Kind = FeatureKind.Categorical, Levels = [.. Levels], Reference = "a" });
        var terms = new List<TermSpec> { new("(intercept)", -2.0, []) };
        for (var i = 0; i < 10; i++)
        {
            var transform = i < 2 ? TransformKind.Log : TransformKind.Identity;
            terms.Add(new TermSpec($"x{i}", 0.05 * (i + 1), [new FactorSpec { Feature = $"x{i}", Transform = transform, Center = 1, Scale = 2 }]));
        }

        terms.Add(new TermSpec("x2^2", 0.01, [new FactorSpec { Feature = "x2" }, new FactorSpec { Feature = "x2" }]));
        terms.Add(new TermSpec("x3*x4", -0.01, [new FactorSpec { Feature = "x3" }, new FactorSpec { Feature = "x4" }]));
        for (var l = 1; l < 5; l++)
        {
            terms.Add(new TermSpec($"group={Levels[l]}", 0.1 * l, [new FactorSpec { Feature = "group", Level = Levels[l] }]));
        }

        for (var l = 1; l < 4; l++)
        {
            terms.Add(new TermSpec($"x0:group={Levels[l]}", 0.02 * l, [new FactorSpec { Feature = "x0", Transform = TransformKind.Log, Center = 1, Scale = 2 }, new FactorSpec { Feature = "group", Level = Levels[l] }]));
        }

        var k = terms.Count;
        var random = new Random(42);
        var a = new double[k, k];
        for (var i = 0; i < k; i++)
        {
            for (var j = 0; j < k; j++)
            {
                a[i, j] = random.NextDouble() - 0.5;
            }
        }

        // V = A·Aᵀ/k + 0.01·I: dense and positive definite.
        var cov = Enumerable.Range(0, k).Select(i => Enumerable.Range(0, k).Select(j =>
        {
            var s = 0.0;
            for (var m = 0; m < k; m++)
            {
                s += a[i, m] * a[j, m];
            }

            return (s / k) + (i == j ? 0.01 : 0.0);
        }).ToImmutableArray()).ToImmutableArray();

        return new ModelDocument
        {
            Format = ModelDocument.FormatV1,
            Model = "bench",
            Version = "1",
            Link = LinkKind.Logit,
            Outcome = new OutcomeSpec("y", "event", "P30D", NegativesPolicy.Explicit),
            Features = [.. features],
            Terms = [.. terms],
            Covariance = cov,
            Threshold = 0.2,
        };
    }

    public static (NamedValue[][] Named, double[] Dense, double[] Design) Data(CompiledModel model)
    {
        var random = new Random(7);
        var named = new NamedValue[Rows][];
        var dense = new double[Rows * model.FeatureCount];
        var design = new double[Rows * model.TermCount];
        for (var r = 0; r < Rows; r++)
        {
            var row = new NamedValue[model.FeatureCount];
            for (var f = 0; f < 10; f++)
            {
                var v = 0.2 + (9.5 * random.NextDouble());
                row[f] = new NamedValue(model.FeatureNames[f], v);
                dense[(r * model.FeatureCount) + f] = v;
            }

            var level = random.Next(Levels.Length);
            row[10] = new NamedValue("group", Levels[level]);
            dense[(r * model.FeatureCount) + 10] = level;
            named[r] = row;
            var error = model.BuildDesign(row, design.AsSpan(r * model.TermCount, model.TermCount), [], out _);
            if (error.IsError)
            {
                throw new InvalidOperationException(error.ToString());
            }
        }

        return (named, dense, design);
    }
}
