using System.Collections.Immutable;
using MathNet.Numerics;
using MathNet.Numerics.Distributions;
using Scorer.Engine;
using Scorer.Engine.Links;
using Scorer.ModelFile;

namespace Scorer.Fitting;

/// <summary>What to fit: the data, the design (options or a template), the link and what to call the result.</summary>
public sealed record FitRequest
{
    public required TrainingData Data { get; init; }
    public DesignOptions? Options { get; init; }
    public DesignTemplate? Template { get; init; }
    public required string Model { get; init; }
    public required string Version { get; init; }
    public string? Description { get; init; }
    public required OutcomeSpec Outcome { get; init; }
    public double? Threshold { get; init; }
    public FitSettings Settings { get; init; } = new();

    /// <summary>Name of the offset column, written into the model as a term with coefficient 1 and no variance.</summary>
    public string? OffsetColumn { get; init; }
}

/// <summary>One row of the coefficient table.</summary>
public sealed record CoefficientRow(string Term, double Estimate, double StandardError, double Z, double P);

/// <summary>A finished fit: the model file and the statistics it was judged by.</summary>
public sealed record FitOutcome
{
    public required ModelDocument Document { get; init; }
    public required IReadOnlyList<CoefficientRow> Coefficients { get; init; }
    public required int N { get; init; }
    public required long Events { get; init; }
    public required double WeightSum { get; init; }
    public required int Iterations { get; init; }
    public required double Deviance { get; init; }
    public required double NullDeviance { get; init; }
    public required double LikelihoodRatio { get; init; }
    public required int LikelihoodRatioDf { get; init; }
    public required double LikelihoodRatioP { get; init; }
    public required double Aic { get; init; }
    public required int Dropped { get; init; }

    /// <summary>η of each training row (offset included), in data order.</summary>
    public required double[] FittedEta { get; init; }
}

/// <summary>
/// Fits a binary GLM to labelled rows and writes the model file that Scorer serves: the design is compiled by the
/// scoring engine itself, so the fitted values and the scores of the training rows are the same numbers.
/// </summary>
public static class Fitter
{
    public static FitOutcome Fit(FitRequest request)
    {
        var data = request.Data;
        var (features, terms) = request.Template is { } template
            ? DesignBuilder.FromTemplate(template, data)
            : DesignBuilder.FromOptions(request.Options ?? new DesignOptions(), data);
        var link = request.Settings.Link;
        var events = data.Outcome.LongCount(v => v > 0.5);
        if (events == 0 || events == data.Rows)
        {
            throw new FitException(request.Outcome.Name, events == 0
                ? $"no row of the {data.Rows} is positive, so nothing can be fitted"
                : $"every row of the {data.Rows} is positive, so nothing can be fitted");
        }

        // The design exactly as the engine will score it.
        var design = new ModelDocument
        {
            Format = ModelDocument.FormatV1,
            Model = request.Model,
            Version = request.Version,
            Link = link,
            Outcome = request.Outcome,
            Features = features,
            Terms = terms,
        };
        var compiled = CompiledModel.Compile(design);
        var k = compiled.TermCount;
        var x = BuildDesignMatrix(compiled, data);
        CheckConstantTerms(x, k, terms);

        var names = terms.Select(t => t.Name).ToList();
        var irls = new Irls(x, k, data.Outcome, data.Weights, data.Offset, request.Settings).Fit(names);
        Separation.Check(irls, x, k, names, data.Rows);
        if (!irls.Converged)
        {
            throw new FitException("", $"the iterations did not converge within {request.Settings.MaxIterations}; raise --max-iterations, or look for terms with very large estimates");
        }

        if (irls.Covariance is null)
        {
            throw new FitException("", "the Fisher information at the estimate is singular, so the coefficients' covariance does not exist; some terms are (nearly) aliased in the rows that carry weight");
        }

        var nullDeviance = NullDeviance(data, link, terms.Any(t => t.IsIntercept), request.Settings);
        var covariance = irls.Covariance;
        var se = Enumerable.Range(0, k).Select(j => Math.Sqrt(covariance[j, j])).ToArray();
        var rows = Enumerable.Range(0, k).Select(j =>
        {
            var z = irls.Beta[j] / se[j];
            return new CoefficientRow(names[j], irls.Beta[j], se[j], z, SpecialFunctions.Erfc(Math.Abs(z) / Math.Sqrt(2)));
        }).ToList();

        var lr = nullDeviance - irls.Deviance;
        var lrDf = k - (terms.Any(t => t.IsIntercept) ? 1 : 0);
        var aic = Aic(link, irls.Eta, data.Outcome, data.Weights) + (2 * k);
        var outcome = new FitOutcome
        {
            Document = design,
            Coefficients = rows,
            N = data.Rows,
            Events = events,
            WeightSum = data.Weights.Sum(),
            Iterations = irls.Iterations,
            Deviance = irls.Deviance,
            NullDeviance = nullDeviance,
            LikelihoodRatio = lr,
            LikelihoodRatioDf = lrDf,
            LikelihoodRatioP = lrDf > 0 ? 1 - ChiSquared.CDF(lrDf, Math.Max(lr, 0)) : double.NaN,
            Aic = aic,
            Dropped = data.Dropped,
            FittedEta = irls.Eta,
        };
        return outcome with { Document = ModelWriter.Build(request, design, irls, outcome, x, data) };
    }

    /// <summary>One design row per training row, by the engine's own dense path (categoricals as level codes).</summary>
    private static double[] BuildDesignMatrix(CompiledModel model, TrainingData data)
    {
        var n = data.Rows;
        var k = model.TermCount;
        var f = model.FeatureCount;
        var x = new double[(long)n * k];
        var columns = model.FeatureNames.Select(name => data.Numeric.TryGetValue(name, out var v) ? v : data.Codes[name].Select(c => (double)c).ToArray()).ToArray();
        var problems = new System.Collections.Concurrent.ConcurrentDictionary<string, (int Count, double Example)>();
        Parallel.For(0, 2, part =>
        {
            Span<double> values = stackalloc double[f];
            var (lo, hi) = part == 0 ? (0, n / 2) : (n / 2, n);
            for (var i = lo; i < hi; i++)
            {
                for (var j = 0; j < f; j++)
                {
                    values[j] = columns[j][i];
                }

                var error = model.BuildDesignFromFeatures(values, x.AsSpan(i * k, k));
                if (error.IsError)
                {
                    var name = model.FeatureNames[error.Feature];
                    problems.AddOrUpdate(name, (1, error.Value), (_, p) => (p.Count + 1, p.Example));
                }
            }
        });

        if (!problems.IsEmpty)
        {
            throw new FitException(problems.OrderBy(p => p.Key, StringComparer.Ordinal).Select(p => new FitProblem(p.Key,
                $"{p.Value.Count} value(s) are outside the domain of the feature's transform, e.g. {TrainingData.Format(p.Value.Example)}")).ToList());
        }

        return x;
    }

    private static void CheckConstantTerms(double[] x, int k, ImmutableArray<TermSpec> terms)
    {
        var n = x.Length / k;
        var problems = new List<FitProblem>();
        var hasIntercept = terms.Any(t => t.IsIntercept);
        for (var j = 0; j < k; j++)
        {
            if (terms[j].IsIntercept || n == 0)
            {
                continue;
            }

            var first = x[j];
            var constant = true;
            for (var i = 1; i < n && constant; i++)
            {
                constant = x[(i * k) + j] == first;
            }

            if (constant)
            {
                problems.Add(new FitProblem(terms[j].Name, $"is constant ({TrainingData.Format(first)} in every row)" +
                    (hasIntercept ? ", so it is aliased with the intercept" : "") + "; leave it out"));
            }
        }

        if (problems.Count > 0)
        {
            throw new FitException(problems);
        }
    }

    private static double NullDeviance(TrainingData data, LinkKind link, bool intercept, FitSettings settings)
    {
        var n = data.Rows;
        var eta = new double[n];
        if (intercept && data.Offset is null)
        {
            var sw = data.Weights.Sum();
            var mean = data.Outcome.Select((y, i) => y * data.Weights[i]).Sum() / sw;
            Array.Fill(eta, Link.Forward(link, mean));
        }
        else if (intercept)
        {
            // With an offset the null model is the intercept-only fit with that offset (as R's glm does).
            var ones = Enumerable.Repeat(1.0, n).ToArray();
            eta = new Irls(ones, 1, data.Outcome, data.Weights, data.Offset, settings).Fit([DesignBuilder.InterceptName]).Eta;
        }
        else
        {
            for (var i = 0; i < n; i++)
            {
                eta[i] = data.Offset?[i] ?? 0;
            }
        }

        return Irls.Deviance(link, eta, data.Outcome, data.Weights);
    }

    /// <summary>R's binomial()$aic for binary y with prior weights m: −2 Σ [lchoose(m, m·y) + m·y ln μ + m(1 − y) ln(1 − μ)], m rounded.</summary>
    private static double Aic(LinkKind link, double[] eta, double[] y, double[] w)
    {
        var sum = 0.0;
        for (var i = 0; i < y.Length; i++)
        {
            var m = Math.Round(w[i]);
            if (m <= 0)
            {
                continue;
            }

            var my = Math.Round(m * y[i]);
            var logChoose = SpecialFunctions.GammaLn(m + 1) - SpecialFunctions.GammaLn(my + 1) - SpecialFunctions.GammaLn(m - my + 1);
            sum += logChoose + (my > 0 ? my * Link.LogInverse(link, eta[i]) : 0) + (m - my > 0 ? (m - my) * Link.LogComplement(link, eta[i]) : 0);
        }

        return -2 * sum;
    }
}
