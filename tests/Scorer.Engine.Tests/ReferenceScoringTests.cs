using Scorer.Engine.Scoring;
using Scorer.Engine.Tests.Support;

namespace Scorer.Engine.Tests;

/// <summary>
/// The engine against R 4.2 (Debian r-base-core): glm(..., binomial(link)) fitted by tests/reference/scoring-reference.R
/// on the open datasets infert (R datasets package: categorical education, log1p and centring) and birthwt (Debian
/// r-cran-mass: categorical race, log, sqrt, centring with scale, and a log(lwt):race interaction), and
/// predict(fit, newdata, type = "link", se.fit = TRUE) on the training rows plus rows outside the training range.
/// Agreement required: 1e-9 relative.
/// </summary>
public sealed class ReferenceScoringTests
{
    private const double Rel = 1e-9;

    public static TheoryData<string, string> Cases() => new()
    {
        { "infert", "logit" }, { "infert", "probit" }, { "infert", "cloglog" },
        { "birthwt", "logit" }, { "birthwt", "probit" }, { "birthwt", "cloglog" },
    };

    [Theory]
    [MemberData(nameof(Cases))]
    public void Linear_predictor_se_probability_and_band_agree_with_R_predict_glm(string dataset, string link)
    {
        var model = CompiledModel.Compile(ReferenceData.Model($"{dataset}-{link}"));
        var rows = ReferenceData.Csv($"{dataset}.rows.csv");
        var expected = ReferenceData.Csv($"{dataset}-{link}.expected.csv");
        Assert.Equal(rows.Count, expected.Count);
        var s95 = ScoreSettings.WithBand(0.95);
        var s90 = ScoreSettings.WithBand(0.90);
        for (var i = 0; i < rows.Count; i++)
        {
            var row = ReferenceData.Row(model, rows[i]);
            var e = expected[i];
            var r = model.Score(row, s95);
            Assert.False(r.Failed, $"row {i + 1}: {r.Error}");
            Tolerance.Relative(ReferenceData.D(e["eta"]), r.Eta, Rel, $"row {i + 1} eta");
            Tolerance.Relative(ReferenceData.D(e["se"]), r.Se, Rel, $"row {i + 1} se");
            Tolerance.Relative(ReferenceData.D(e["probability"]), r.Probability, Rel, $"row {i + 1} probability");
            Tolerance.Relative(ReferenceData.D(e["lower95"]), r.Lower, Rel, $"row {i + 1} lower 95%");
            Tolerance.Relative(ReferenceData.D(e["upper95"]), r.Upper, Rel, $"row {i + 1} upper 95%");
            var r90 = model.Score(row, s90);
            Tolerance.Relative(ReferenceData.D(e["lower90"]), r90.Lower, Rel, $"row {i + 1} lower 90%");
            Tolerance.Relative(ReferenceData.D(e["upper90"]), r90.Upper, Rel, $"row {i + 1} upper 90%");
        }
    }

    [Theory]
    [MemberData(nameof(Cases))]
    public void Contributions_from_the_training_means_sum_per_term_to_R_predict_type_terms(string dataset, string link)
    {
        // R's predict(type = "terms") gives each model term's part of eta centred at the training column means; a term
        // of R spans the coefficients terms-assign.csv gives it (a factor's dummies, an interaction with a factor).
        var model = CompiledModel.Compile(ReferenceData.Model($"{dataset}-{link}"));
        Assert.True(model.ContributionsFromMeans);
        var rows = ReferenceData.Csv($"{dataset}.rows.csv");
        var expected = ReferenceData.Csv($"{dataset}-{link}.terms.csv");
        var assign = ReferenceData.Csv($"{dataset}-{link}.terms-assign.csv").Select(a => int.Parse(a["term"], System.Globalization.CultureInfo.InvariantCulture)).ToArray();
        Assert.Equal(model.TermCount, assign.Length);
        var contributions = new double[model.TermCount];
        for (var i = 0; i < rows.Count; i++)
        {
            var r = model.Score(ReferenceData.Row(model, rows[i]), ScoreSettings.Default, contributions);
            Assert.False(r.Failed, $"row {i + 1}: {r.Error}");
            for (var t = 1; t <= expected[i].Count; t++)
            {
                var ours = model.VaryingTerms.Where(j => assign[j] == t).Sum(j => contributions[j]);
                var theirs = ReferenceData.D(expected[i][$"term{t}"]);
                Assert.True(Math.Abs(ours - theirs) <= 1e-9 * Math.Max(1, Math.Abs(r.Eta)), $"row {i + 1} term {t}: {ours:R} against R's {theirs:R}");
            }
        }

        Assert.DoesNotContain(model.InterceptIndex, model.VaryingTerms);
    }

    [Theory]
    [MemberData(nameof(Cases))]
    public void Dense_feature_path_gives_the_same_numbers_as_the_named_path(string dataset, string link)
    {
        var model = CompiledModel.Compile(ReferenceData.Model($"{dataset}-{link}"));
        var rows = ReferenceData.Csv($"{dataset}.rows.csv");
        var settings = ScoreSettings.Default;
        var dense = new double[model.FeatureCount];
        foreach (var cells in rows)
        {
            for (var f = 0; f < model.FeatureCount; f++)
            {
                var name = model.FeatureNames[f];
                dense[f] = model.FeatureKindOf(f) == ModelFile.FeatureKind.Numeric
                    ? ReferenceData.D(cells[name])
                    : model.Levels(f).ToList().IndexOf(cells[name]);
            }

            var a = model.Score(ReferenceData.Row(model, cells), settings);
            var b = model.ScoreFeatures(dense, settings);
            Assert.Equal(a.Eta, b.Eta);
            Assert.Equal(a.Se, b.Se);
            Assert.Equal(a.Lower, b.Lower);
            Assert.Equal(a.Upper, b.Upper);
        }
    }

    [Fact]
    public void Inverse_links_and_their_derivatives_agree_with_R_over_the_whole_range_of_eta()
    {
        // R: plogis/dlogis, pnorm/dnorm, -expm1(-exp(eta)) and exp(eta - exp(eta)), eta from -700 to 700.
        foreach (var row in ReferenceData.Csv("links.csv"))
        {
            var eta = ReferenceData.D(row["eta"]);
            Tolerance.Relative(ReferenceData.D(row["logit"]), Links.Link.Inverse(ModelFile.LinkKind.Logit, eta), 1e-13, $"plogis({eta})");
            Tolerance.Relative(ReferenceData.D(row["logit_d"]), Links.Link.Derivative(ModelFile.LinkKind.Logit, eta), 1e-13, $"dlogis({eta})");
            Tolerance.Relative(ReferenceData.D(row["probit"]), Links.Link.Inverse(ModelFile.LinkKind.Probit, eta), 1e-12, $"pnorm({eta})");
            Tolerance.Relative(ReferenceData.D(row["probit_d"]), Links.Link.Derivative(ModelFile.LinkKind.Probit, eta), 1e-12, $"dnorm({eta})");
            Tolerance.Relative(ReferenceData.D(row["cloglog"]), Links.Link.Inverse(ModelFile.LinkKind.CLogLog, eta), 1e-13, $"cloglog inverse({eta})");
            Tolerance.Relative(ReferenceData.D(row["cloglog_d"]), Links.Link.Derivative(ModelFile.LinkKind.CLogLog, eta), 1e-12, $"cloglog derivative({eta})");
        }
    }
}
