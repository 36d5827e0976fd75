using System.Collections.Immutable;
using System.Text.Json;
using Scorer.Engine;
using Scorer.ModelFile;

namespace Scorer.Fitting;

/// <summary>
/// Writes the fitted model: coefficients, covariance, training baseline (deciles of η and of each numeric feature,
/// level proportions, the largest se(η)) and a <c>fit</c> section with the statistics of the fit.
/// </summary>
internal static class ModelWriter
{
    public static ModelDocument Build(FitRequest request, ModelDocument design, IrlsResult irls, FitOutcome outcome, double[] x, TrainingData data)
    {
        var k = design.Terms.Length;
        var terms = design.Terms.Select((t, j) => t with { Coefficient = irls.Beta[j] }).ToList();
        var features = design.Features.ToList();
        var cov = Enumerable.Range(0, k).Select(r => Enumerable.Range(0, k).Select(c => irls.Covariance![r, c]).ToImmutableArray()).ToList();
        if (request.OffsetColumn is { } offset)
        {
            // The offset enters η with coefficient 1, known exactly: a term with no variance.
            features.Add(new FeatureSpec { Name = offset, Kind = FeatureKind.Numeric, Min = data.Offset!.Min(), Max = data.Offset!.Max() });
            terms.Add(new TermSpec($"offset({offset})", 1.0, [new FactorSpec { Feature = offset }]));
            cov = [.. cov.Select(row => row.Add(0.0)), Enumerable.Repeat(0.0, k + 1).ToImmutableArray()];
        }

        var fitted = design with
        {
            Description = request.Description ?? design.Description,
            Features = [.. features],
            Terms = [.. terms],
            Covariance = [.. cov],
            Threshold = request.Threshold,
        };

        var compiled = CompiledModel.Compile(fitted with { Baseline = null, Fit = null });
        fitted = fitted with { Baseline = Baseline(compiled, irls, x, k, data, outcome), Fit = FitSection(request, outcome) };
        ModelFileReader.EnsureValid(fitted);
        return fitted;
    }

    private static BaselineSpec Baseline(CompiledModel model, IrlsResult irls, double[] x, int k, TrainingData data, FitOutcome outcome)
    {
        var n = data.Rows;
        var withOffset = model.TermCount > k;
        var maxSe = 0.0;
        var row = new double[model.TermCount];
        var sums = new double[model.TermCount];
        for (var i = 0; i < n; i++)
        {
            x.AsSpan(i * k, k).CopyTo(row);
            if (withOffset)
            {
                row[k] = data.Offset![i];
            }

            maxSe = Math.Max(maxSe, model.ScoreDesign(row, Engine.Scoring.ScoreSettings.Default).Se);
            for (var j = 0; j < row.Length; j++)
            {
                sums[j] += row[j];
            }
        }

        // The unweighted mean of each term's value over the training rows (the column means of the design, as R's
        // predict(type = "terms") centres), so that contributions say how far a row moves η from a typical one.
        var termMeans = model.VaryingTerms.ToImmutableDictionary(j => model.TermNames[j], j => sums[j] / n, StringComparer.Ordinal);

        var numeric = ImmutableDictionary.CreateBuilder<string, BinnedBaseline>(StringComparer.Ordinal);
        foreach (var f in model.Document.Features.Where(f => f.Kind == FeatureKind.Numeric && data.Numeric.ContainsKey(f.Name)))
        {
            if (Deciles(data.Numeric[f.Name]) is { } bins)
            {
                numeric[f.Name] = bins;
            }
        }

        var levels = ImmutableDictionary.CreateBuilder<string, ImmutableDictionary<string, double>>(StringComparer.Ordinal);
        foreach (var f in model.Document.Features.Where(f => f.Kind == FeatureKind.Categorical))
        {
            var counts = new long[f.Levels.Length];
            foreach (var c in data.Codes[f.Name])
            {
                counts[c]++;
            }

            levels[f.Name] = f.Levels.Select((l, i) => KeyValuePair.Create(l, (double)counts[i] / n)).ToImmutableDictionary(StringComparer.Ordinal);
        }

        return new BaselineSpec
        {
            N = n,
            Events = outcome.Events,
            LinearPredictor = Deciles(irls.Eta),
            MaxSe = maxSe,
            Numeric = numeric.ToImmutable(),
            Levels = levels.ToImmutable(),
            TermMeans = termMeans,
        };
    }

    /// <summary>
    /// Decile edges (R's default quantile type 7) with tied edges merged, and the share of rows in each bin
    /// (−∞, e₁], (e₁, e₂], …, (e_m, ∞); null when every value is the same.
    /// </summary>
    internal static BinnedBaseline? Deciles(double[] values)
    {
        var sorted = (double[])values.Clone();
        Array.Sort(sorted);
        var n = sorted.Length;
        var edges = new List<double>();
        for (var q = 1; q <= 9; q++)
        {
            var h = (n - 1) * q / 10.0;
            var lo = (int)Math.Floor(h);
            var e = sorted[lo] + ((h - lo) * (sorted[Math.Min(lo + 1, n - 1)] - sorted[lo]));
            if (e < sorted[n - 1] && (edges.Count == 0 || e > edges[^1]))
            {
                edges.Add(e);
            }
        }

        if (edges.Count == 0)
        {
            return null;
        }

        var counts = new long[edges.Count + 1];
        var bin = 0;
        foreach (var v in sorted)
        {
            while (bin < edges.Count && v > edges[bin])
            {
                bin++;
            }

            counts[bin]++;
        }

        return new BinnedBaseline([.. edges], [.. counts.Select(c => (double)c / n)]);
    }

    private static JsonElement FitSection(FitRequest request, FitOutcome o)
    {
        using var ms = new MemoryStream();
        using (var w = new Utf8JsonWriter(ms))
        {
            w.WriteStartObject();
            w.WriteString("method", "IRLS (Fisher scoring), scorer fit");
            w.WriteString("link", ModelFileWriter.LinkName(request.Settings.Link));
            w.WriteNumber("n", o.N);
            w.WriteNumber("events", o.Events);
            if (o.WeightSum != o.N)
            {
                w.WriteNumber("weight_sum", o.WeightSum);
            }

            if (o.Dropped > 0)
            {
                w.WriteNumber("dropped_missing", o.Dropped);
            }

            w.WriteNumber("iterations", o.Iterations);
            w.WriteNumber("deviance", o.Deviance);
            w.WriteNumber("null_deviance", o.NullDeviance);
            w.WriteStartObject("likelihood_ratio");
            w.WriteNumber("statistic", o.LikelihoodRatio);
            w.WriteNumber("df", o.LikelihoodRatioDf);
            if (double.IsFinite(o.LikelihoodRatioP))
            {
                w.WriteNumber("p", o.LikelihoodRatioP);
            }

            w.WriteEndObject();
            w.WriteNumber("aic", o.Aic);
            w.WriteStartArray("coefficients");
            foreach (var c in o.Coefficients)
            {
                w.WriteStartObject();
                w.WriteString("term", c.Term);
                w.WriteNumber("estimate", c.Estimate);
                w.WriteNumber("se", c.StandardError);
                w.WriteNumber("z", c.Z);
                w.WriteNumber("p", c.P);
                w.WriteEndObject();
            }

            w.WriteEndArray();
            w.WriteEndObject();
        }

        using var doc = JsonDocument.Parse(ms.ToArray());
        return doc.RootElement.Clone();
    }
}
