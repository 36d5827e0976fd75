using System.Collections.Immutable;
using System.Globalization;
using Scorer.Engine;
using Scorer.Engine.Scoring;
using Scorer.ModelFile;
using Scorer.Statistics.Recalibration;
using Scorer.Statistics.Tests;
using Scorer.Testing;
using Xunit.Abstractions;

namespace Scorer.Statistics.Tests.Recalibration;

/// <summary>
/// <see cref="Recalibrator.Apply"/> on the model file R wrote from <c>glm(type ~ npreg + glu + bmi + ped + age,
/// binomial)</c> on MASS::Pima.tr (tests/reference/out/pima-logit.model.json), recalibrated on the Pima.te rows
/// (tests/reference/out/pima.rows.csv, outcomes pima.outcomes.csv) and scored back with the engine.
/// </summary>
public sealed class RecalibratedModelTests(ITestOutputHelper output)
{
    private readonly Near near = new(output);

    private static ModelDocument PimaModel() => ModelFileReader.ReadValidFile(TestRepository.ReferenceFile("pima-logit.model.json"));

    /// <summary>The Pima.te rows in the model's feature order (all numeric).</summary>
    private static double[][] PimaRows(CompiledModel model)
    {
        var lines = File.ReadAllLines(TestRepository.ReferenceFile("pima.rows.csv")).Where(l => l.Length > 0).ToArray();
        var header = lines[0].Split(',').Select(h => h.Trim('"')).ToList();
        var columns = model.FeatureNames.Select(n => header.IndexOf(n)).ToArray();
        Assert.DoesNotContain(-1, columns);
        return lines.Skip(1)
            .Select(l => l.Split(','))
            .Select(cells => columns.Select(c => double.Parse(cells[c].Trim('"'), CultureInfo.InvariantCulture)).ToArray())
            .ToArray();
    }

    private static byte[] PimaOutcomes()
    {
        var lines = File.ReadAllLines(TestRepository.ReferenceFile("pima.outcomes.csv")).Where(l => l.Length > 0).ToArray();
        Assert.Equal("y", lines[0].Trim('"'));
        return lines.Skip(1).Select(l => byte.Parse(l.Trim('"'), CultureInfo.InvariantCulture)).ToArray();
    }

    private static ScoredRow[] Score(CompiledModel model, double[][] rows) =>
        rows.Select(r => model.ScoreFeatures(r, ScoreSettings.Default)).ToArray();

    private static double[] Eta(ScoredRow[] scored) => scored.Select(s => s.Eta).ToArray();

    [Fact]
    public void Coefficients_are_b_times_the_old_ones_with_a_added_to_the_intercept_using_R_glm_a_and_b()
    {
        var old = PimaModel();
        var c = ReferenceCase.Load("pima-logit");
        var r = RReference.Recalibration("pima-logit", LinkKind.Logit);
        var fit = Recalibrator.Fit(c.Eta, c.Y, LinkKind.Logit, RecalibrationKind.InterceptAndSlope);
        var recalibrated = Recalibrator.Apply(old, fit, "r-logit.1");

        // R: a, b = coef(glm(y ~ eta, binomial)) on Pima.te's eta; the new coefficients are b·β_old, and a + b·β₀_old.
        Assert.Equal(old.Terms.Length, recalibrated.Terms.Length);
        for (var t = 0; t < old.Terms.Length; t++)
        {
            var expected = r["b"] * old.Terms[t].Coefficient + (old.Terms[t].IsIntercept ? r["a"] : 0.0);
            near.Relative(expected, recalibrated.Terms[t].Coefficient, 1e-8, $"coefficient of {old.Terms[t].Name}");
            Assert.Equal(old.Terms[t].Name, recalibrated.Terms[t].Name);
            Assert.Equal(old.Terms[t].Factors.ToArray(), recalibrated.Terms[t].Factors.ToArray());
        }

        Assert.Equal("r-logit.1", recalibrated.Version);
        Assert.Equal(old.Model, recalibrated.Model);
        Assert.Equal(old.Features, recalibrated.Features);
        Assert.Equal(old.Outcome, recalibrated.Outcome);
        Assert.Equal(old.Link, recalibrated.Link);
    }

    [Fact]
    public void The_written_model_file_reads_back_valid_and_equal()
    {
        var old = PimaModel();
        var c = ReferenceCase.Load("pima-logit");
        var fit = Recalibrator.Fit(c.Eta, c.Y, LinkKind.Logit, RecalibrationKind.InterceptAndSlope);
        var recalibrated = Recalibrator.Apply(old, fit, "r-logit.1");

        var text = ModelFileWriter.WriteToString(recalibrated);
        var read = ModelFileReader.Read(new MemoryStream(System.Text.Encoding.UTF8.GetBytes(text)));
        Assert.True(read.IsValid, string.Join("\n", read.Errors));
        var back = read.Document!;
        Assert.Equal(recalibrated.Terms.Select(t => t.Name), back.Terms.Select(t => t.Name));
        Assert.Equal(recalibrated.Terms.Select(t => t.Coefficient), back.Terms.Select(t => t.Coefficient));
        Assert.Equal(recalibrated.Terms.SelectMany(t => t.Factors), back.Terms.SelectMany(t => t.Factors));
        Assert.Equal(recalibrated.Version, back.Version);
        Assert.Equal(recalibrated.Description, back.Description);
        var covariance = recalibrated.Covariance!.Value;
        var covarianceBack = back.Covariance!.Value;
        for (var i = 0; i < covariance.Length; i++)
        {
            Assert.Equal(covariance[i].ToArray(), covarianceBack[i].ToArray());
        }

        Assert.StartsWith(old.Description!, back.Description, StringComparison.Ordinal);
        Assert.Contains("Recalibrated from version r-logit by logistic recalibration of intercept and slope on 332 outcomes (109 events)",
            back.Description, StringComparison.Ordinal);
        var section = back.Fit!.Value;
        Assert.Equal("recalibration", section.GetProperty("method").GetString());
        Assert.Equal("intercept-and-slope", section.GetProperty("kind").GetString());
        Assert.Equal("r-logit", section.GetProperty("recalibrated_from").GetString());
        Assert.Equal(fit.Slope, section.GetProperty("slope").GetDouble());
        Assert.Equal(332, section.GetProperty("n").GetInt32());
    }

    [Fact]
    public void Scoring_with_the_new_model_gives_a_plus_b_times_the_old_eta_and_the_propagated_se()
    {
        var old = PimaModel();
        var oldModel = CompiledModel.Compile(old);
        var rows = PimaRows(oldModel);
        var oldScores = Score(oldModel, rows);
        var c = ReferenceCase.Load("pima-logit");
        // The engine's eta of the Pima.te rows is R's predict(type = "link") in pima-logit.csv.
        for (var i = 0; i < rows.Length; i++)
        {
            near.Relative(c.Eta[i], oldScores[i].Eta, 1e-12, $"row {i + 1} old eta against R");
        }

        var fit = Recalibrator.Fit(Eta(oldScores), c.Y, LinkKind.Logit, RecalibrationKind.InterceptAndSlope);
        var newModel = CompiledModel.Compile(Recalibrator.Apply(old, fit, "r-logit.1"));
        var newScores = Score(newModel, rows);
        for (var i = 0; i < rows.Length; i++)
        {
            var eta = oldScores[i].Eta;
            var expected = fit.Intercept + fit.Slope * eta;
            near.Absolute(expected, newScores[i].Eta, 1e-12, $"row {i + 1} eta_new");
            // se(η_new)² = b²·se(η_old)² + Var(a) + 2·η_old·Cov(a, b) + η_old²·Var(b): x'V_new x with x₀ = 1 and x'β_old = η_old.
            var variance = fit.Slope * fit.Slope * oldScores[i].Se * oldScores[i].Se + fit.InterceptSe * fit.InterceptSe
                + 2 * eta * fit.Covariance + eta * eta * fit.SlopeSe * fit.SlopeSe;
            near.Relative(Math.Sqrt(variance), newScores[i].Se, 1e-10, $"row {i + 1} se(eta_new)");
        }
    }

    [Fact]
    public void In_the_large_moves_only_the_intercept_and_adds_var_a_to_its_variance()
    {
        var old = PimaModel();
        var c = ReferenceCase.Load("pima-logit");
        var r = RReference.Recalibration("pima-logit", LinkKind.Logit);
        var fit = Recalibrator.Fit(c.Eta, c.Y, LinkKind.Logit, RecalibrationKind.InTheLarge);
        var recalibrated = Recalibrator.Apply(old, fit, "r-logit.large");
        // R: a = coef(glm(y ~ 1 + offset(eta), binomial)), Var(a) = vcov of that fit.
        near.Relative(old.Terms[0].Coefficient + r["a1"], recalibrated.Terms[0].Coefficient, 1e-8, "intercept");
        for (var t = 1; t < old.Terms.Length; t++)
        {
            Assert.Equal(old.Terms[t].Coefficient, recalibrated.Terms[t].Coefficient);
        }

        var v = old.Covariance!.Value;
        var w = recalibrated.Covariance!.Value;
        near.Relative(v[0][0] + r["va1"], w[0][0], 1e-8, "Var(intercept)");
        for (var i = 0; i < v.Length; i++)
        {
            for (var j = 0; j < v.Length; j++)
            {
                if (i != 0 || j != 0)
                {
                    Assert.Equal(v[i][j], w[i][j]);
                }
            }
        }

        Assert.Contains("recalibration in the large (slope fixed at 1)", recalibrated.Description, StringComparison.Ordinal);
    }

    [Fact]
    public void An_offset_term_is_scaled_to_b_and_takes_the_variance_of_b()
    {
        // The fitting tools write an offset as a term with coefficient 1 and a zero row and column of the covariance
        // (docs/fitting.md). Here pima-logit gains the offset age/10 (a structural check; the values are not a fit).
        var old = PimaModel();
        var k = old.Terms.Length;
        var v = old.Covariance!.Value;
        var withOffset = old with
        {
            Terms = old.Terms.Add(new TermSpec("offset(age/10)", 1.0, [new FactorSpec { Feature = "age", Scale = 10 }])),
            Covariance = [.. v.Select(row => row.Add(0.0)), ImmutableArray.CreateRange(Enumerable.Repeat(0.0, k + 1))],
            Baseline = old.Baseline! with { TermMeans = ImmutableDictionary<string, double>.Empty }, // no training mean for the added term
        };
        var oldModel = CompiledModel.Compile(withOffset);
        var rows = PimaRows(oldModel);
        var oldScores = Score(oldModel, rows);
        var fit = Recalibrator.Fit(Eta(oldScores), PimaOutcomes(), LinkKind.Logit, RecalibrationKind.InterceptAndSlope);
        var recalibrated = Recalibrator.Apply(withOffset, fit, "offset.1");

        Assert.Equal(fit.Slope, recalibrated.Terms[k].Coefficient);
        near.Relative(fit.SlopeSe * fit.SlopeSe, recalibrated.Covariance!.Value[k][k], 1e-14, "Var(offset coefficient)");
        var newScores = Score(CompiledModel.Compile(recalibrated), rows);
        for (var i = 0; i < rows.Length; i++)
        {
            near.Absolute(fit.Intercept + fit.Slope * oldScores[i].Eta, newScores[i].Eta, 1e-12, $"row {i + 1} eta_new");
        }
    }

    [Fact]
    public void A_sampling_correction_is_folded_into_the_intercept_and_dropped()
    {
        // pima-logit as if fitted on a sample with Pima.tr's event rate 68/200 for a population at 0.2 (structural check).
        var old = PimaModel() with { Sampling = new SamplingSpec(0.34, 0.2) };
        var oldModel = CompiledModel.Compile(old);
        Assert.NotEqual(0.0, oldModel.InterceptCorrection);
        var rows = PimaRows(oldModel);
        var oldScores = Score(oldModel, rows);
        var fit = Recalibrator.Fit(Eta(oldScores), PimaOutcomes(), LinkKind.Logit, RecalibrationKind.InterceptAndSlope);
        var recalibrated = Recalibrator.Apply(old, fit, "sampled.1");

        Assert.Null(recalibrated.Sampling);
        near.Relative(fit.Intercept + fit.Slope * (old.Terms[0].Coefficient + oldModel.InterceptCorrection), recalibrated.Terms[0].Coefficient, 1e-15, "intercept");
        var newScores = Score(CompiledModel.Compile(recalibrated), rows);
        for (var i = 0; i < rows.Length; i++)
        {
            near.Absolute(fit.Intercept + fit.Slope * oldScores[i].Eta, newScores[i].Eta, 1e-12, $"row {i + 1} eta_new");
        }

        Assert.Contains("sampling prior correction", recalibrated.Fit!.Value.GetProperty("notes")[0].GetString(), StringComparison.Ordinal);
    }

    [Fact]
    public void The_baseline_keeps_n_events_and_features_maps_the_eta_bins_and_drops_max_se()
    {
        // The training baseline of pima-logit computed by R from glm on MASS::Pima.tr: n, events, the decile edges of
        // predict(m) (quantile type 7) with the share of rows in each bin, and max(predict(m, se.fit = TRUE)$se.fit).
        var r = RReference.Run("""
            suppressMessages(library(MASS))
            m <- glm(type ~ npreg + glu + bmi + ped + age, binomial, data = Pima.tr)
            lp <- predict(m); e <- unique(quantile(lp, seq(0, 1, 0.1))[2:10])
            share <- as.numeric(table(cut(lp, c(-Inf, e, Inf)))) / length(lp)
            v <- c(n = nrow(Pima.tr), events = sum(Pima.tr$type == "Yes"), maxse = max(predict(m, se.fit = TRUE)$se.fit),
              setNames(e, paste0("e", seq_along(e))), setNames(share, paste0("s", seq_along(share))))
            cat(sprintf("%s %.17g\n", names(v), v), sep = "")
            """);
        var edges = r.Keys.Where(key => key.StartsWith('e') && key != "events").OrderBy(key => int.Parse(key[1..], CultureInfo.InvariantCulture)).Select(key => r[key]).ToArray();
        var shares = r.Keys.Where(key => key.StartsWith('s')).OrderBy(key => int.Parse(key[1..], CultureInfo.InvariantCulture)).Select(key => r[key]).ToArray();
        var bins = new BinnedBaseline([.. edges], [.. shares]);
        var old = PimaModel() with
        {
            Baseline = new BaselineSpec { N = (long)r["n"], Events = (long)r["events"], LinearPredictor = bins, MaxSe = r["maxse"] },
        };
        var c = ReferenceCase.Load("pima-logit");
        var fit = Recalibrator.Fit(c.Eta, c.Y, LinkKind.Logit, RecalibrationKind.InterceptAndSlope);
        var recalibrated = Recalibrator.Apply(old, fit, "r-logit.1");

        var baseline = recalibrated.Baseline!;
        Assert.Equal(200, baseline.N);
        Assert.Equal(68, baseline.Events);
        Assert.Null(baseline.MaxSe);
        Assert.Equal(edges.Select(e => fit.Intercept + fit.Slope * e).ToArray(), baseline.LinearPredictor!.Edges.ToArray());
        Assert.Equal(shares, baseline.LinearPredictor.Proportions.ToArray());
        Assert.Contains(recalibrated.Fit!.Value.GetProperty("notes").EnumerateArray(), n => n.GetString()!.Contains("max_se is left out", StringComparison.Ordinal));
    }

    [Fact]
    public void A_negative_slope_reverses_the_eta_bins_with_their_proportions()
    {
        var old = PimaModel() with
        {
            Baseline = new BaselineSpec { N = 10, Events = 3, LinearPredictor = new BinnedBaseline([-2.0, 0.0, 1.0], [0.1, 0.2, 0.3, 0.4]) },
        };
        var fit = new RecalibrationFit(RecalibrationKind.InterceptAndSlope, LinkKind.Logit, 0.5, -2.0, 0.1, 0.2, 0.0, 10, 3, -5, -6, 4);
        var bins = Recalibrator.Apply(old, fit, "flipped").Baseline!.LinearPredictor!;
        Assert.Equal([-1.5, 0.5, 4.5], bins.Edges.ToArray());
        Assert.Equal([0.4, 0.3, 0.2, 0.1], bins.Proportions.ToArray());
    }

    [Fact]
    public void A_model_without_an_intercept_term_is_refused()
    {
        var old = PimaModel();
        var v = old.Covariance!.Value;
        var noIntercept = old with
        {
            Terms = old.Terms.RemoveAt(0),
            Covariance = [.. v.Skip(1).Select(row => row.RemoveAt(0))],
        };
        var c = ReferenceCase.Load("pima-logit");
        var fit = Recalibrator.Fit(c.Eta, c.Y, LinkKind.Logit, RecalibrationKind.InTheLarge);
        var ex = Assert.Throws<ArgumentException>(() => Recalibrator.Apply(noIntercept, fit, "r-logit.1"));
        Assert.Equal("model", ex.ParamName);
        Assert.Contains("has no intercept term", ex.Message, StringComparison.Ordinal);
    }

    [Theory]
    [InlineData("r-logit", "is the original's own")]
    [InlineData("", "the new version is empty")]
    [InlineData("new version", "'new version' is not a version")]
    public void A_bad_new_version_is_refused_with_the_reason(string version, string reason)
    {
        var c = ReferenceCase.Load("pima-logit");
        var fit = Recalibrator.Fit(c.Eta, c.Y, LinkKind.Logit, RecalibrationKind.InTheLarge);
        var ex = Assert.Throws<ArgumentException>(() => Recalibrator.Apply(PimaModel(), fit, version));
        Assert.Equal("newVersion", ex.ParamName);
        Assert.Contains(reason, ex.Message, StringComparison.Ordinal);
    }

    [Fact]
    public void A_fit_with_another_link_is_refused()
    {
        var c = ReferenceCase.Load("pima-logit");
        var fit = Recalibrator.Fit(c.Eta, c.Y, LinkKind.Probit, RecalibrationKind.InTheLarge);
        var ex = Assert.Throws<ArgumentException>(() => Recalibrator.Apply(PimaModel(), fit, "r-logit.1"));
        Assert.Equal("fit", ex.ParamName);
        Assert.Contains("the fit used the probit link but model 'pima' uses logit", ex.Message, StringComparison.Ordinal);
    }
}
