using Scorer.Engine;
using Scorer.Engine.Scoring;
using Scorer.ModelFile;

namespace Scorer.Fitting.Tests;

/// <summary>
/// The fitter against R 4.2's glm(..., family = binomial(link)) run to epsilon = 1e-14 by
/// tests/reference/fitting-reference.R, on infert (R datasets: categorical education, log1p, centring) and birthwt
/// (Debian r-cran-mass: categorical race, log, and a log(lwt):race interaction), for logit, probit and cloglog.
/// Agreement required: 1e-7 relative for coefficients, standard errors, deviance, null deviance and AIC.
/// </summary>
public sealed class ReferenceFitTests
{
    private const double Rel = 1e-7;

    public static TheoryData<string, string> Cases() => new()
    {
        { "infert", "logit" }, { "infert", "probit" }, { "infert", "cloglog" },
        { "birthwt", "logit" }, { "birthwt", "probit" }, { "birthwt", "cloglog" },
    };

    internal static FitOutcome FitLikeR(string dataset, string link)
    {
        var linkKind = link switch { "logit" => LinkKind.Logit, "probit" => LinkKind.Probit, _ => LinkKind.CLogLog };
        var (columns, options) = dataset == "infert"
            ? (new TrainingColumns { Outcome = "case", Numeric = ["age", "parity", "spontaneous", "induced"], Categorical = ["education"] },
               new DesignOptions
               {
                   Numeric = ["age", "parity", "spontaneous", "induced"],
                   Categorical = ["education"],
                   Transforms = new Dictionary<string, TransformKind> { ["spontaneous"] = TransformKind.Log1P },
                   Center = true,
               })
            : (new TrainingColumns { Outcome = "low", Numeric = ["age", "lwt", "smoke", "ht", "ui", "ptl"], Categorical = ["race"] },
               new DesignOptions
               {
                   Numeric = ["age", "lwt", "smoke", "ht", "ui", "ptl"],
                   Categorical = ["race"],
                   Transforms = new Dictionary<string, TransformKind> { ["lwt"] = TransformKind.Log },
                   References = new Dictionary<string, string> { ["race"] = "white" },
                   Interactions = ["lwt:race"],
               });
        var data = TrainingData.ReadCsv(Reference.File($"{dataset}.train.csv"), columns);
        return Fitter.Fit(new FitRequest
        {
            Data = data,
            Options = options,
            Model = dataset,
            Version = "fit-" + link,
            Outcome = new OutcomeSpec(columns.Outcome, "1", "P1D", NegativesPolicy.Explicit),
            Settings = new FitSettings { Link = linkKind },
        });
    }

    [Theory]
    [MemberData(nameof(Cases))]
    public void Coefficients_and_standard_errors_agree_with_R_glm(string dataset, string link)
    {
        var fit = FitLikeR(dataset, link);
        var expected = Reference.Csv($"fit-{dataset}-{link}.coefficients.csv");
        Assert.Equal(expected.Select(e => e["term"]), fit.Coefficients.Select(c => c.Term));
        foreach (var (e, c) in expected.Zip(fit.Coefficients))
        {
            Reference.Relative(Reference.D(e["estimate"]), c.Estimate, Rel, $"{c.Term} estimate");
            Reference.Relative(Reference.D(e["se"]), c.StandardError, Rel, $"{c.Term} standard error");
        }
    }

    [Theory]
    [MemberData(nameof(Cases))]
    public void Deviance_null_deviance_and_AIC_agree_with_R_glm(string dataset, string link)
    {
        var fit = FitLikeR(dataset, link);
        var stats = Reference.Csv($"fit-{dataset}-{link}.stats.csv")[0];
        Reference.Relative(Reference.D(stats["deviance"]), fit.Deviance, Rel, "deviance");
        Reference.Relative(Reference.D(stats["null_deviance"]), fit.NullDeviance, Rel, "null deviance");
        Reference.Relative(Reference.D(stats["aic"]), fit.Aic, Rel, "AIC");
        Assert.Equal(int.Parse(stats["df_residual"], System.Globalization.CultureInfo.InvariantCulture), fit.N - fit.Coefficients.Count);
    }

    [Theory]
    [MemberData(nameof(Cases))]
    public void The_written_model_file_is_valid_and_scores_the_training_rows_to_their_fitted_values(string dataset, string link)
    {
        var fit = FitLikeR(dataset, link);
        var text = ModelFileWriter.WriteToString(fit.Document);
        var read = ModelFileReader.Read(System.Text.Encoding.UTF8.GetBytes(text));
        Assert.True(read.IsValid, string.Join("; ", read.Problems));
        Assert.Empty(read.Warnings);
        var model = CompiledModel.Compile(read.Document!);
        var rows = Reference.Csv($"{dataset}.train.csv");
        for (var i = 0; i < rows.Count; i++)
        {
            NamedValue[] row = [.. model.FeatureNames.Select((name, f) => new NamedValue(name,
                model.FeatureKindOf(f) == FeatureKind.Numeric ? FeatureValue.Of(Reference.D(rows[i][name])) : FeatureValue.Of(rows[i][name])))];
            var scored = model.Score(row, ScoreSettings.Default);
            Assert.False(scored.Failed);
            Assert.Equal(fit.FittedEta[i], scored.Eta, 12);
            Assert.True(scored.Se <= model.MaxSe * (1 + 1e-12));
        }

        var baseline = read.Document!.Baseline!;
        Assert.Equal(rows.Count, baseline.N);
        Assert.Equal(fit.Events, baseline.Events);
        Assert.Equal(1.0, baseline.LinearPredictor!.Proportions.Sum(), 12);
    }

    [Fact]
    public void A_fit_with_prior_weights_and_an_offset_agrees_with_R_glm()
    {
        // R: glm(case ~ parity + education, binomial, weights = w, offset = off) on infert (fitting-reference.R).
        var columns = new TrainingColumns { Outcome = "case", Numeric = ["parity"], Categorical = ["education"], Weights = "w", Offset = "off" };
        var data = TrainingData.ReadCsv(Reference.File("infert.train.csv"), columns);
        var fit = Fitter.Fit(new FitRequest
        {
            Data = data,
            Options = new DesignOptions { Numeric = ["parity"], Categorical = ["education"] },
            Model = "infert",
            Version = "weighted",
            Outcome = new OutcomeSpec("case", "1", "P1D", NegativesPolicy.Explicit),
            OffsetColumn = "off",
        });
        var expected = Reference.Csv("fit-infert-weighted.coefficients.csv");
        foreach (var (e, c) in expected.Zip(fit.Coefficients))
        {
            Assert.Equal(e["term"], c.Term);
            Reference.Relative(Reference.D(e["estimate"]), c.Estimate, Rel, $"{c.Term} estimate");
            Reference.Relative(Reference.D(e["se"]), c.StandardError, Rel, $"{c.Term} standard error");
        }

        var stats = Reference.Csv("fit-infert-weighted.stats.csv")[0];
        Reference.Relative(Reference.D(stats["deviance"]), fit.Deviance, Rel, "deviance");
        Reference.Relative(Reference.D(stats["null_deviance"]), fit.NullDeviance, Rel, "null deviance (intercept-only fit with the offset)");
        Reference.Relative(Reference.D(stats["aic"]), fit.Aic, Rel, "AIC");

        // The offset travels into the model file as a term with coefficient 1 and no variance.
        var offsetTerm = fit.Document.Terms[^1];
        Assert.Equal("offset(off)", offsetTerm.Name);
        Assert.Equal(1.0, offsetTerm.Coefficient);
        Assert.All(fit.Document.Covariance!.Value[^1], v => Assert.Equal(0.0, v));
        Assert.True(ModelFileReader.Read(System.Text.Encoding.UTF8.GetBytes(ModelFileWriter.WriteToString(fit.Document))).IsValid);
    }
}
