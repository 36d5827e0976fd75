using System.Collections.Immutable;
using Scorer.ModelFile;

namespace Scorer.Fitting;

/// <summary>
/// Turns design options (or a template from a model file) and the training data into the model's features (with
/// training ranges, levels and reference) and terms (with zero coefficients): the design the engine will score with.
/// </summary>
public static class DesignBuilder
{
    public const string InterceptName = "(intercept)";

    public static (ImmutableArray<FeatureSpec> Features, ImmutableArray<TermSpec> Terms) FromOptions(DesignOptions options, TrainingData data)
    {
        var problems = new List<FitProblem>();
        foreach (var name in options.Numeric.Intersect(options.Categorical, StringComparer.Ordinal))
        {
            problems.Add(new FitProblem(name, "is given both as numeric and as categorical"));
        }

        var features = new List<FeatureSpec>();
        foreach (var name in options.Numeric)
        {
            features.Add(NumericFeature(name, data, null));
        }

        foreach (var name in options.Categorical)
        {
            var levels = data.LevelNames[name].Order(StringComparer.Ordinal).ToList();
            data.OrderLevels(name, levels);
            var reference = options.References.TryGetValue(name, out var r) ? r : levels[0];
            if (!levels.Contains(reference))
            {
                problems.Add(new FitProblem(name, $"the reference level '{reference}' does not occur in the data; the levels are {string.Join(", ", levels)}"));
            }

            if (levels.Count < 2)
            {
                problems.Add(new FitProblem(name, $"has a single level ('{levels[0]}') in the data, so it cannot be a predictor"));
            }

            features.Add(new FeatureSpec
            {
                Name = name,
                Kind = FeatureKind.Categorical,
                Levels = [.. levels],
                Reference = reference,
                Missing = MissingPolicy.Reject,
                Unknown = UnknownLevelPolicy.Reject,
            });
        }

        foreach (var (name, _) in options.Transforms.Where(t => !options.Numeric.Contains(t.Key)))
        {
            problems.Add(new FitProblem(name, "has a transform but is not a numeric feature (--numeric)"));
        }

        foreach (var name in options.References.Keys.Where(k => !options.Categorical.Contains(k)))
        {
            problems.Add(new FitProblem(name, "has a reference level but is not a categorical feature (--categorical)"));
        }

        var byName = features.ToDictionary(f => f.Name, StringComparer.Ordinal);

        // Each feature's factor choices: one numeric factor, or one indicator per non-reference level.
        List<(string Name, FactorSpec Factor)> Choices(string feature)
        {
            var f = byName[feature];
            if (f.Kind == FeatureKind.Categorical)
            {
                return f.Levels.Where(l => l != f.Reference).Select(l => ($"{feature}={l}", new FactorSpec { Feature = feature, Level = l })).ToList();
            }

            var transform = options.Transforms.TryGetValue(feature, out var t) ? t : TransformKind.Identity;
            var center = options.Center ? TransformedMean(data.Numeric[feature], transform) : 0.0;
            var label = transform == TransformKind.Identity ? feature : $"{ModelFileWriter.TransformName(transform)}({feature})";
            return [(label, new FactorSpec { Feature = feature, Transform = transform, Center = center })];
        }

        var terms = new List<TermSpec>();
        if (options.Intercept)
        {
            terms.Add(new TermSpec(InterceptName, 0, []));
        }

        if (problems.Count == 0)
        {
            foreach (var name in options.Numeric.Concat(options.Categorical))
            {
                terms.AddRange(Choices(name).Select(c => new TermSpec(c.Name, 0, [c.Factor])));
            }

            foreach (var interaction in options.Interactions)
            {
                var parts = interaction.Split(':', StringSplitOptions.TrimEntries | StringSplitOptions.RemoveEmptyEntries);
                var unknown = parts.Where(p => !byName.ContainsKey(p)).ToList();
                if (parts.Length < 2 || unknown.Count > 0)
                {
                    problems.Add(new FitProblem(interaction, parts.Length < 2
                        ? "an interaction joins two or more features with ':'"
                        : $"names {string.Join(", ", unknown)}, not a feature given with --numeric or --categorical"));
                    continue;
                }

                IEnumerable<(string Name, ImmutableArray<FactorSpec> Factors)> combos = [("", [])];
                foreach (var part in parts)
                {
                    var choices = Choices(part);
                    combos = combos.SelectMany(c => choices.Select(ch => (c.Name.Length == 0 ? ch.Name : c.Name + ":" + ch.Name, c.Factors.Add(ch.Factor)))).ToList();
                }

                terms.AddRange(combos.Select(c => new TermSpec(c.Name, 0, c.Factors)));
            }
        }

        if (problems.Count > 0)
        {
            throw new FitException(problems);
        }

        return ([.. features], [.. terms]);
    }

    /// <summary>The design of a model file: its features (ranges and means refitted) and its terms, unchanged.</summary>
    public static (ImmutableArray<FeatureSpec> Features, ImmutableArray<TermSpec> Terms) FromTemplate(DesignTemplate template, TrainingData data)
    {
        var problems = new List<FitProblem>();
        var features = new List<FeatureSpec>();
        foreach (var f in template.Features)
        {
            if (f.Kind == FeatureKind.Numeric)
            {
                features.Add(NumericFeature(f.Name, data, f));
                continue;
            }

            var seen = data.LevelNames[f.Name];
            foreach (var level in seen.Where(l => !f.Levels.Contains(l)))
            {
                problems.Add(new FitProblem(f.Name, $"level '{level}' occurs in the data but not in the design ({string.Join(", ", f.Levels)})"));
            }

            var counts = new int[seen.Count];
            foreach (var c in data.Codes[f.Name])
            {
                counts[c]++;
            }

            foreach (var level in f.Levels.Where(l => !seen.Contains(l)))
            {
                problems.Add(new FitProblem(f.Name, $"level '{level}' of the design has no rows in the data, so its terms cannot be estimated"));
            }

            if (problems.Count == 0)
            {
                data.OrderLevels(f.Name, f.Levels);
            }

            features.Add(f);
        }

        if (problems.Count > 0)
        {
            throw new FitException(problems);
        }

        return ([.. features], [.. template.Terms.Select(t => t with { Coefficient = 0 })]);
    }

    private static FeatureSpec NumericFeature(string name, TrainingData data, FeatureSpec? template)
    {
        var values = data.Numeric[name];
        var min = values.Length == 0 ? 0 : values.Min();
        var max = values.Length == 0 ? 0 : values.Max();
        var missing = template?.Missing ?? MissingPolicy.Reject;
        return new FeatureSpec
        {
            Name = name,
            Kind = FeatureKind.Numeric,
            Description = template?.Description,
            Min = min,
            Max = max,
            Missing = missing,
            Mean = missing == MissingPolicy.Mean ? values.Average() : null,
        };
    }

    private static double TransformedMean(double[] values, TransformKind transform)
    {
        var sum = 0.0;
        foreach (var v in values)
        {
            sum += transform switch
            {
                TransformKind.Log => Math.Log(v),
                TransformKind.Log1P => Engine.Numerics.Elementary.Log1P(v),
                TransformKind.Sqrt => Math.Sqrt(v),
                _ => v,
            };
        }

        return values.Length == 0 ? 0 : sum / values.Length;
    }
}
