using System.Collections.Immutable;
using System.Globalization;
using System.Text.Json;
using MathNet.Numerics.LinearAlgebra;

namespace Scorer.ModelFile.Validation;

/// <summary>
/// Builds a <see cref="ModelDocument"/> from JSON already checked against the schema, and checks the rules the schema
/// cannot express. Tolerant of structural errors (the schema reports those): it skips what it cannot read.
/// </summary>
internal sealed class SemanticReader(ModelFileReaderOptions options, List<ModelFileProblem> problems)
{
    // How many levels a message lists before it says how many there are in all.
    private const int LevelsNamed = 10;

    // The levels of each categorical feature as a set: a factor's or a baseline's level is looked up once, not searched
    // for in the list (a feature may have hundreds of thousands of levels).
    private readonly Dictionary<string, HashSet<string>> _levels = new(StringComparer.Ordinal);

    public ModelDocument? Read(JsonElement root)
    {
        var link = Str(root, "link") switch
        {
            "logit" => LinkKind.Logit,
            "probit" => LinkKind.Probit,
            "cloglog" => LinkKind.CLogLog,
            _ => (LinkKind?)null,
        };

        var outcome = ReadOutcome(root);
        var features = ReadFeatures(root);
        var terms = ReadTerms(root, features);
        var covariance = ReadCovariance(root, terms.Length);
        var sampling = ReadSampling(root, terms, link);
        var baseline = ReadBaseline(root, features, terms);
        CheckUnusedFeatures(features, terms);

        double? threshold = root.TryGetProperty("threshold", out var t) && t.ValueKind == JsonValueKind.Number ? t.GetDouble() : null;
        JsonElement? fit = root.TryGetProperty("fit", out var f) && f.ValueKind == JsonValueKind.Object ? f.Clone() : null;
        var extensions = root.EnumerateObject().Where(p => p.Name.StartsWith("x-", StringComparison.Ordinal))
            .ToImmutableDictionary(p => p.Name, p => p.Value.Clone(), StringComparer.Ordinal);

        var format = Str(root, "format");
        var model = Str(root, "model");
        var version = Str(root, "version");
        if (format is null || model is null || version is null || link is null || outcome is null)
        {
            return null;
        }

        return new ModelDocument
        {
            Format = format,
            Model = model,
            Version = version,
            Description = Str(root, "description"),
            Link = link.Value,
            Outcome = outcome,
            Features = features,
            Terms = terms,
            Covariance = covariance,
            Threshold = threshold,
            Sampling = sampling,
            Baseline = baseline,
            Fit = fit,
            Extensions = extensions,
        };
    }

    private OutcomeSpec? ReadOutcome(JsonElement root)
    {
        if (!root.TryGetProperty("outcome", out var o) || o.ValueKind != JsonValueKind.Object)
        {
            return null;
        }

        var horizon = Str(o, "horizon");
        if (horizon is not null && !Iso8601Duration.TryParse(horizon, out _))
        {
            Error("$.outcome.horizon", $"'{horizon}' is not a positive ISO 8601 duration", "for example P30D, PT12H or P3M");
            return null;
        }

        var negatives = Str(o, "negatives") switch
        {
            "explicit" => NegativesPolicy.Explicit,
            "implicit" => NegativesPolicy.Implicit,
            _ => (NegativesPolicy?)null,
        };
        var name = Str(o, "name");
        var positive = Str(o, "positive");
        return name is null || positive is null || horizon is null || negatives is null
            ? null
            : new OutcomeSpec(name, positive, horizon, negatives.Value);
    }

    private ImmutableArray<FeatureSpec> ReadFeatures(JsonElement root)
    {
        var result = ImmutableArray.CreateBuilder<FeatureSpec>();
        if (!root.TryGetProperty("features", out var array) || array.ValueKind != JsonValueKind.Array)
        {
            return result.ToImmutable();
        }

        var names = new Dictionary<string, int>(StringComparer.Ordinal);
        var i = -1;
        foreach (var f in array.EnumerateArray())
        {
            i++;
            var path = $"$.features[{i}]";
            if (f.ValueKind != JsonValueKind.Object || Str(f, "name") is not { } name)
            {
                continue;
            }

            if (!names.TryAdd(name, i))
            {
                Error(path + ".name", $"duplicate feature name '{name}' (also at $.features[{names[name]}])");
                continue;
            }

            if (name == ModelDocument.LinearPredictorSeries)
            {
                Error(path + ".name", $"'{name}' is reserved: it names the linear predictor's distribution in the baseline and in drift reports",
                    "rename the feature");
            }

            var kind = Str(f, "type") == "categorical" ? FeatureKind.Categorical : FeatureKind.Numeric;
            var missing = Str(f, "missing") == "mean" ? MissingPolicy.Mean : MissingPolicy.Reject;
            var unknown = Str(f, "unknown") == "reference" ? UnknownLevelPolicy.Reference : UnknownLevelPolicy.Reject;
            var min = Num(f, "min");
            var max = Num(f, "max");
            var mean = Num(f, "mean");
            var levels = ImmutableArray<string>.Empty;
            string? reference = null;

            if (kind == FeatureKind.Numeric)
            {
                if (min is { } lo && max is { } hi && lo > hi)
                {
                    Error(path + ".min", $"min {Fmt(lo)} is above max {Fmt(hi)}");
                }

                if (min is null || max is null)
                {
                    Warn(path, $"numeric feature '{name}' has no training range (min and max); scoring cannot warn of extrapolation");
                }

                if (mean is { } m && min is { } lo2 && max is { } hi2 && (m < lo2 || m > hi2))
                {
                    Warn(path + ".mean", $"the imputation mean {Fmt(m)} lies outside the training range [{Fmt(lo2)}, {Fmt(hi2)}]");
                }
            }
            else
            {
                levels = StrArray(f, "levels");
                var seen = new HashSet<string>(StringComparer.Ordinal);
                for (var j = 0; j < levels.Length; j++)
                {
                    if (!seen.Add(levels[j]))
                    {
                        Error($"{path}.levels[{j}]", $"duplicate level '{levels[j]}' of feature '{name}'");
                    }
                }

                _levels[name] = seen;
                reference = Str(f, "reference");
                if (reference is not null && !levels.IsEmpty && !seen.Contains(reference))
                {
                    Error(path + ".reference", $"reference level '{reference}' is not one of the levels of '{name}' ({ListLevels(levels)})");
                }
            }

            result.Add(new FeatureSpec
            {
                Name = name,
                Kind = kind,
                Description = Str(f, "description"),
                Min = min,
                Max = max,
                Levels = levels,
                Reference = reference,
                Missing = missing,
                Mean = mean,
                Unknown = unknown,
            });
        }

        return result.ToImmutable();
    }

    /// <summary>The terms written with no factors (the intercept); a term whose factors could not be read is not one of them.</summary>
    private readonly HashSet<string> _constantTerms = new(StringComparer.Ordinal);

    private ImmutableArray<TermSpec> ReadTerms(JsonElement root, ImmutableArray<FeatureSpec> features)
    {
        var result = ImmutableArray.CreateBuilder<TermSpec>();
        if (!root.TryGetProperty("terms", out var array) || array.ValueKind != JsonValueKind.Array)
        {
            return result.ToImmutable();
        }

        var byName = features.ToDictionary(f => f.Name, StringComparer.Ordinal);
        var names = new Dictionary<string, int>(StringComparer.Ordinal);
        var designs = new Dictionary<string, int>(StringComparer.Ordinal);
        var intercept = -1;
        var i = -1;
        foreach (var t in array.EnumerateArray())
        {
            i++;
            var path = $"$.terms[{i}]";
            if (t.ValueKind != JsonValueKind.Object)
            {
                continue;
            }

            // A missing name or an unreadable coefficient has been reported already (schema or number check); the term
            // is kept so that the covariance is still compared with the right number of terms.
            var name = Str(t, "name");
            var coefficient = Num(t, "coefficient") ?? double.NaN;
            if (name is not null && !names.TryAdd(name, i))
            {
                Error(path + ".name", $"duplicate term name '{name}' (also at $.terms[{names[name]}])");
            }

            var factors = ImmutableArray.CreateBuilder<FactorSpec>();
            var declared = -1;
            if (t.TryGetProperty("factors", out var fa) && fa.ValueKind == JsonValueKind.Array)
            {
                declared = fa.GetArrayLength();
                var j = -1;
                foreach (var fe in fa.EnumerateArray())
                {
                    j++;
                    if (ReadFactor(fe, $"{path}.factors[{j}]", byName) is { } factor)
                    {
                        factors.Add(factor);
                    }
                }

                CheckFactorsOfOneTerm(factors, path);
            }

            // A term with a factor that could not be read (reported already) is neither an intercept nor an alias.
            var complete = factors.Count == declared;
            if (complete && factors.Count == 0)
            {
                _constantTerms.Add(name ?? "");
                if (intercept >= 0)
                {
                    Error(path, $"a second intercept (a term with no factors); the first is $.terms[{intercept}]");
                }

                intercept = i;
            }

            var key = string.Join("*", factors.Select(DesignKey).Order(StringComparer.Ordinal));
            if (complete && factors.Count > 0 && !designs.TryAdd(key, i))
            {
                Error(path, $"term '{name}' has the same factors as $.terms[{designs[key]}]; the two are aliased");
            }

            result.Add(new TermSpec(name ?? "", coefficient, factors.ToImmutable()));
        }

        return result.ToImmutable();
    }

    private FactorSpec? ReadFactor(JsonElement fe, string path, Dictionary<string, FeatureSpec> byName)
    {
        if (fe.ValueKind != JsonValueKind.Object || Str(fe, "feature") is not { } featureName)
        {
            return null;
        }

        if (!byName.TryGetValue(featureName, out var feature))
        {
            Error(path + ".feature", $"'{featureName}' is not a declared feature");
            return null;
        }

        var level = Str(fe, "level");
        if (level is not null)
        {
            if (feature.Kind != FeatureKind.Categorical)
            {
                Error(path + ".level", $"feature '{featureName}' is numeric; only a categorical feature has levels");
                return null;
            }

            if (!HasLevel(feature, level))
            {
                Error(path + ".level", $"'{level}' is not a level of '{featureName}' ({ListLevels(feature.Levels)})");
                return null;
            }

            if (level == feature.Reference)
            {
                Warn(path + ".level", $"'{level}' is the reference level of '{featureName}'; in treatment coding its indicator is usually left out");
            }

            return new FactorSpec { Feature = featureName, Level = level };
        }

        if (feature.Kind != FeatureKind.Numeric)
        {
            Error(path, $"feature '{featureName}' is categorical; its factor needs a 'level'");
            return null;
        }

        var transform = Str(fe, "transform") switch
        {
            "log" => TransformKind.Log,
            "log1p" => TransformKind.Log1P,
            "sqrt" => TransformKind.Sqrt,
            _ => TransformKind.Identity,
        };
        CheckTransformDomain(transform, feature, path);
        return new FactorSpec
        {
            Feature = featureName,
            Transform = transform,
            Center = Num(fe, "center") ?? 0.0,
            Scale = Num(fe, "scale") ?? 1.0,
        };
    }

    private void CheckTransformDomain(TransformKind transform, FeatureSpec feature, string path)
    {
        var (bound, strict, what) = transform switch
        {
            TransformKind.Log => (0.0, true, "log needs values above 0"),
            TransformKind.Log1P => (-1.0, true, "log1p needs values above -1"),
            TransformKind.Sqrt => (0.0, false, "sqrt needs values of 0 or more"),
            _ => (double.NegativeInfinity, false, ""),
        };
        if (transform == TransformKind.Identity)
        {
            return;
        }

        bool Outside(double v) => strict ? v <= bound : v < bound;
        if (feature.Min is { } min && Outside(min))
        {
            Warn(path + ".transform", $"{what}, but the training minimum of '{feature.Name}' is {Fmt(min)}");
        }

        if (feature.Missing == MissingPolicy.Mean && feature.Mean is { } mean && Outside(mean))
        {
            Error(path + ".transform", $"{what}, but the imputation mean of '{feature.Name}' is {Fmt(mean)}");
        }
    }

    private void CheckFactorsOfOneTerm(ImmutableArray<FactorSpec>.Builder factors, string path)
    {
        foreach (var group in factors.Where(f => f.IsIndicator).GroupBy(f => f.Feature, StringComparer.Ordinal))
        {
            if (group.Select(f => f.Level).Distinct(StringComparer.Ordinal).Count() > 1)
            {
                Warn(path + ".factors", $"indicators of two levels of '{group.Key}' in one term: the term is always 0");
            }
        }

    }

    private static string DesignKey(FactorSpec f) => f.IsIndicator
        ? f.Feature + "=" + f.Level
        : string.Create(CultureInfo.InvariantCulture, $"{f.Transform}({f.Feature};{f.Center:R};{f.Scale:R})");

    private ImmutableArray<ImmutableArray<double>>? ReadCovariance(JsonElement root, int k)
    {
        if (!root.TryGetProperty("covariance", out var cov) || cov.ValueKind != JsonValueKind.Array)
        {
            Warn("$", "no covariance: scoring returns no standard error and no band");
            return null;
        }

        var rows = cov.GetArrayLength();
        if (rows != k)
        {
            Error("$.covariance", $"has {rows} rows; the model has {k} terms, so it must be {k} × {k}");
            return null;
        }

        var matrix = Matrix<double>.Build.Dense(k, k);
        var i = 0;
        var ok = true;
        foreach (var row in cov.EnumerateArray())
        {
            if (row.ValueKind != JsonValueKind.Array || row.GetArrayLength() != k)
            {
                Error($"$.covariance[{i}]", $"has {(row.ValueKind == JsonValueKind.Array ? row.GetArrayLength() : 0)} entries; each row needs {k}");
                ok = false;
                i++;
                continue;
            }

            var j = 0;
            foreach (var v in row.EnumerateArray())
            {
                if (v.ValueKind != JsonValueKind.Number || !v.TryGetDouble(out var d) || !double.IsFinite(d))
                {
                    ok = false;
                }
                else
                {
                    matrix[i, j] = d;
                }

                j++;
            }

            i++;
        }

        if (!ok)
        {
            return null;
        }

        for (i = 0; i < k; i++)
        {
            if (matrix[i, i] < 0)
            {
                Error($"$.covariance[{i}][{i}]", $"a variance cannot be negative ({Fmt(matrix[i, i])})");
                ok = false;
            }

            for (var j = i + 1; j < k; j++)
            {
                var a = matrix[i, j];
                var b = matrix[j, i];
                var scale = Math.Max(Math.Sqrt(Math.Abs(matrix[i, i] * matrix[j, j])), Math.Max(Math.Abs(a), Math.Abs(b)));
                if (Math.Abs(a - b) > options.SymmetryTolerance * scale && a != b)
                {
                    Error($"$.covariance[{i}][{j}]", $"not symmetric: {Fmt(a)} here but {Fmt(b)} at $.covariance[{j}][{i}]");
                    ok = false;
                }
            }
        }

        if (!ok)
        {
            return null;
        }

        // The semi-definiteness check (an eigen-decomposition, k³): the term limit bounds k. The matrix is symmetrised in
        // place rather than through copies.
        var asRead = Enumerable.Range(0, k).Select(r => Enumerable.Range(0, k).Select(c => matrix[r, c]).ToImmutableArray()).ToImmutableArray();
        for (i = 0; i < k; i++)
        {
            for (var j = i + 1; j < k; j++)
            {
                var mean = 0.5 * (matrix[i, j] + matrix[j, i]);
                matrix[i, j] = mean;
                matrix[j, i] = mean;
            }
        }

        var eigen = matrix.Evd(Symmetricity.Symmetric).EigenValues.Select(c => c.Real).ToArray();
        var largest = eigen.Length == 0 ? 0 : eigen.Max();
        var smallest = eigen.Length == 0 ? 0 : eigen.Min();
        if (smallest < -options.DefinitenessTolerance * Math.Max(largest, double.Epsilon))
        {
            Error("$.covariance", $"not positive semi-definite: its smallest eigenvalue is {Fmt(smallest)} (largest {Fmt(largest)})");
            return null;
        }

        if (smallest <= options.DefinitenessTolerance * largest)
        {
            Warn("$.covariance", "singular (some combination of terms has zero variance); standard errors are computed from an eigen-decomposition");
        }

        return asRead;
    }

    private SamplingSpec? ReadSampling(JsonElement root, ImmutableArray<TermSpec> terms, LinkKind? link)
    {
        if (!root.TryGetProperty("sampling", out var s) || s.ValueKind != JsonValueKind.Object)
        {
            return null;
        }

        var training = Num(s, "training_event_rate");
        var population = Num(s, "population_event_rate");
        if (!terms.Any(t => t.IsIntercept))
        {
            Error("$.sampling", "prior correction adjusts the intercept, but the model has no intercept term");
        }

        if (link is not null and not LinkKind.Logit)
        {
            Error("$.sampling", "prior correction of the intercept (King & Zeng 2001) holds for the logit link only",
                "fit a probit or cloglog model on data weighted to the population event rate instead");
        }

        return training is { } tr && population is { } po ? new SamplingSpec(tr, po) : null;
    }

    private BaselineSpec? ReadBaseline(JsonElement root, ImmutableArray<FeatureSpec> features, ImmutableArray<TermSpec> terms)
    {
        if (!root.TryGetProperty("baseline", out var b) || b.ValueKind != JsonValueKind.Object)
        {
            Warn("$", "no baseline: the distribution of scores and features cannot be compared with training");
            return null;
        }

        long? nRead = b.TryGetProperty("n", out var ne) && ne.ValueKind == JsonValueKind.Number && ne.TryGetInt64(out var nv) ? nv : null;
        long? eventsRead = b.TryGetProperty("events", out var ee) && ee.ValueKind == JsonValueKind.Number && ee.TryGetInt64(out var ev) ? ev : null;
        var n = nRead ?? 0;
        var events = eventsRead ?? 0;
        if (nRead is not null && eventsRead is not null && events > n)
        {
            Error("$.baseline.events", $"{events} events is more than the {n} training rows");
        }

        var lp = b.TryGetProperty("linear_predictor", out var lpe) ? ReadBins(lpe, "$.baseline.linear_predictor") : null;
        var numeric = ImmutableDictionary.CreateBuilder<string, BinnedBaseline>(StringComparer.Ordinal);
        var levels = ImmutableDictionary.CreateBuilder<string, ImmutableDictionary<string, double>>(StringComparer.Ordinal);
        if (b.TryGetProperty("features", out var fs) && fs.ValueKind == JsonValueKind.Object)
        {
            var byName = features.ToDictionary(f => f.Name, StringComparer.Ordinal);
            foreach (var p in fs.EnumerateObject())
            {
                var path = JsonPath.Property("$.baseline.features", p.Name);
                if (!byName.TryGetValue(p.Name, out var feature))
                {
                    Error(path, $"'{p.Name}' is not a declared feature");
                    continue;
                }

                if (feature.Kind == FeatureKind.Numeric)
                {
                    if (!p.Value.TryGetProperty("edges", out _))
                    {
                        Error(path, $"'{p.Name}' is numeric; its baseline needs 'edges' and 'proportions'");
                    }
                    else if (ReadBins(p.Value, path) is { } bins)
                    {
                        numeric[p.Name] = bins;
                    }
                }
                else if (!p.Value.TryGetProperty("levels", out var lv) || lv.ValueKind != JsonValueKind.Object)
                {
                    Error(path, $"'{p.Name}' is categorical; its baseline needs 'levels' with the proportion of each");
                }
                else
                {
                    var map = ImmutableDictionary.CreateBuilder<string, double>(StringComparer.Ordinal);
                    foreach (var l in lv.EnumerateObject())
                    {
                        if (!HasLevel(feature, l.Name))
                        {
                            Error(JsonPath.Property(path + ".levels", l.Name), $"'{l.Name}' is not a level of '{p.Name}'");
                        }
                        else if (l.Value.ValueKind == JsonValueKind.Number)
                        {
                            map[l.Name] = l.Value.GetDouble();
                        }
                    }

                    CheckSumsToOne(map.Values, path + ".levels");
                    levels[p.Name] = map.ToImmutable();
                }
            }
        }

        double? maxSe = b.TryGetProperty("max_se", out var ms) && ms.ValueKind == JsonValueKind.Number ? ms.GetDouble() : null;
        return new BaselineSpec
        {
            N = n,
            Events = events,
            LinearPredictor = lp,
            MaxSe = maxSe,
            Numeric = numeric.ToImmutable(),
            Levels = levels.ToImmutable(),
            TermMeans = b.TryGetProperty("term_means", out var tm) ? ReadTermMeans(tm, terms) : ImmutableDictionary<string, double>.Empty,
        };
    }

    /// <summary>baseline.term_means: a finite mean for every term with factors, and for nothing else.</summary>
    private ImmutableDictionary<string, double> ReadTermMeans(JsonElement e, ImmutableArray<TermSpec> terms)
    {
        const string path = "$.baseline.term_means";
        var means = ImmutableDictionary.CreateBuilder<string, double>(StringComparer.Ordinal);
        if (e.ValueKind != JsonValueKind.Object)
        {
            Error(path, "expected an object: the training mean of each term's value, by term name");
            return means.ToImmutable();
        }

        var byName = terms.ToDictionary(t => t.Name, StringComparer.Ordinal);
        foreach (var p in e.EnumerateObject())
        {
            var at = JsonPath.Property(path, p.Name);
            if (!byName.TryGetValue(p.Name, out var term))
            {
                Error(at, $"'{p.Name}' is not a term of the model");
            }
            else if (_constantTerms.Contains(p.Name))
            {
                Error(at, $"'{p.Name}' has no factors: its value is 1 in every row, so it has no mean to report against", "leave it out");
            }
            else if (p.Value.ValueKind != JsonValueKind.Number || !double.IsFinite(p.Value.GetDouble()))
            {
                Error(at, "expected a finite number: the mean of the term's value over the training rows");
            }
            else
            {
                means[p.Name] = p.Value.GetDouble();
            }
        }

        var missing = terms.Where(t => !_constantTerms.Contains(t.Name) && !e.TryGetProperty(t.Name, out _)).Select(t => t.Name).ToList();
        if (means.Count > 0 && missing.Count > 0)
        {
            Error(path, $"no mean for {string.Join(", ", missing.Take(5).Select(m => $"'{m}'"))}{(missing.Count > 5 ? $" and {missing.Count - 5} more" : "")}: give one for every term with factors, or none");
        }

        return means.ToImmutable();
    }

    private BinnedBaseline? ReadBins(JsonElement e, string path)
    {
        if (e.ValueKind != JsonValueKind.Object)
        {
            return null;
        }

        var edges = NumArray(e, "edges");
        var proportions = NumArray(e, "proportions");
        var ok = true;
        for (var i = 1; i < edges.Length; i++)
        {
            if (!(edges[i] > edges[i - 1]))
            {
                Error($"{path}.edges[{i}]", $"edges must increase strictly; {Fmt(edges[i])} follows {Fmt(edges[i - 1])}", "merge tied quantiles into one edge");
                ok = false;
            }
        }

        if (proportions.Length != edges.Length + 1)
        {
            Error(path + ".proportions", $"{edges.Length} edges make {edges.Length + 1} bins, but there are {proportions.Length} proportions");
            ok = false;
        }

        CheckSumsToOne(proportions, path + ".proportions");
        return ok ? new BinnedBaseline(edges, proportions) : null;
    }

    private void CheckSumsToOne(IEnumerable<double> values, string path)
    {
        var sum = values.Sum();
        if (Math.Abs(sum - 1.0) > 1e-6)
        {
            Error(path, $"proportions add up to {Fmt(sum)}, not 1");
        }
    }

    private void CheckUnusedFeatures(ImmutableArray<FeatureSpec> features, ImmutableArray<TermSpec> terms)
    {
        var used = terms.SelectMany(t => t.Factors).Select(f => f.Feature).ToHashSet(StringComparer.Ordinal);
        for (var i = 0; i < features.Length; i++)
        {
            if (!used.Contains(features[i].Name))
            {
                Warn($"$.features[{i}]", $"feature '{features[i].Name}' is not used by any term");
            }
        }
    }

    private bool HasLevel(FeatureSpec feature, string level) =>
        _levels.TryGetValue(feature.Name, out var set) ? set.Contains(level) : feature.Levels.Contains(level);

    private static string ListLevels(ImmutableArray<string> levels) => levels.Length <= LevelsNamed
        ? string.Join(", ", levels)
        : string.Join(", ", levels.Take(LevelsNamed)) + string.Create(CultureInfo.InvariantCulture, $", … ({levels.Length} levels in all)");

    private void Error(string path, string reason, string? hint = null) => problems.Add(new ModelFileProblem(path, reason, ProblemSeverity.Error, hint));

    private void Warn(string path, string reason) => problems.Add(new ModelFileProblem(path, reason, ProblemSeverity.Warning));

    private static string? Str(JsonElement e, string name) =>
        e.TryGetProperty(name, out var v) && v.ValueKind == JsonValueKind.String ? v.GetString() : null;

    private static double? Num(JsonElement e, string name) =>
        e.TryGetProperty(name, out var v) && v.ValueKind == JsonValueKind.Number && v.TryGetDouble(out var d) && double.IsFinite(d) ? d : null;

    private static ImmutableArray<string> StrArray(JsonElement e, string name) =>
        e.TryGetProperty(name, out var v) && v.ValueKind == JsonValueKind.Array
            ? v.EnumerateArray().Where(x => x.ValueKind == JsonValueKind.String).Select(x => x.GetString()!).ToImmutableArray()
            : [];

    private static ImmutableArray<double> NumArray(JsonElement e, string name) =>
        e.TryGetProperty(name, out var v) && v.ValueKind == JsonValueKind.Array
            ? v.EnumerateArray().Where(x => x.ValueKind == JsonValueKind.Number).Select(x => x.GetDouble()).ToImmutableArray()
            : [];

    private static string Fmt(double v) => v.ToString("R", CultureInfo.InvariantCulture);
}
