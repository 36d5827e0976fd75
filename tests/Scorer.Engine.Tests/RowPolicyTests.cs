using System.Collections.Immutable;
using Scorer.Engine.Scoring;
using Scorer.Engine.Tests.Support;
using Scorer.ModelFile;

namespace Scorer.Engine.Tests;

/// <summary>What the engine does with each kind of value: as the model file says, with the feature named.</summary>
public sealed class RowPolicyTests
{
    private static NamedValue[] Row(FeatureValue vibration, FeatureValue temp, FeatureValue site) =>
        [new("vibration", vibration), new("temp", temp), new("site", site)];

    [Fact]
    public void A_term_value_is_transform_minus_centre_over_scale_and_indicators_multiply()
    {
        var model = CompiledModel.Compile(Models.Pump());
        var c = new double[model.TermCount];
        var r = model.Score(Row(4.0, 65.0, "river"), ScoreSettings.Default, c);
        // Hand calculation from the model's definition.
        var x = new[] { 1, Math.Log(4), (65 - 55) / 10.0, 0, 1, Math.Log(4) };
        var beta = new[] { -3, 0.8, 0.3, 0.2, 0.5, 0.25 };
        var eta = x.Zip(beta).Sum(p => p.First * p.Second);
        Assert.Equal(eta, r.Eta, 14);
        Assert.Equal(Math.Sqrt(x.Sum(v => v * v * 0.01)), r.Se, 14);
        Assert.Equal(1 / (1 + Math.Exp(-eta)), r.Probability, 14);
        Assert.Equal(beta[5] * x[5], c[5], 14);
        Assert.Equal(r.Probability >= 0.2 ? 1 : 0, r.Flag);
    }

    [Fact]
    public void A_missing_value_is_rejected_naming_the_feature_when_the_file_says_reject()
    {
        var model = CompiledModel.Compile(Models.Pump(tempMissing: MissingPolicy.Reject));
        var r = model.Score(Row(4.0, FeatureValue.Missing, "east"), ScoreSettings.Default);
        Assert.True(r.Failed);
        Assert.Equal(RowErrorKind.MissingValue, r.Error.Kind);
        Assert.Equal("temp", RowMessages.Field(model, r.Error));
        Assert.True(double.IsNaN(r.Probability));
    }

    [Fact]
    public void An_absent_feature_counts_as_missing()
    {
        var model = CompiledModel.Compile(Models.Pump());
        var r = model.Score([new NamedValue("temp", 50.0), new NamedValue("site", "east")], ScoreSettings.Default);
        Assert.Equal(RowErrorKind.MissingValue, r.Error.Kind);
        Assert.Equal("vibration", RowMessages.Field(model, r.Error));
    }

    [Fact]
    public void A_missing_value_is_imputed_with_the_mean_and_a_warning_when_the_file_says_mean()
    {
        var model = CompiledModel.Compile(Models.Pump(tempMissing: MissingPolicy.Mean));
        var warnings = new RowWarning[model.MaxWarningsPerRow];
        var imputed = model.Score(Row(4.0, FeatureValue.Missing, "east"), ScoreSettings.Default, default, warnings);
        var atMean = model.Score(Row(4.0, 55.0, "east"), ScoreSettings.Default);
        Assert.False(imputed.Failed);
        Assert.Equal(atMean.Eta, imputed.Eta);
        Assert.Equal(1, imputed.WarningCount);
        Assert.Equal(RowWarningKind.MissingImputed, warnings[0].Kind);
        Assert.Contains("temp is missing", RowMessages.Describe(model, warnings[0]), StringComparison.Ordinal);
    }

    [Fact]
    public void An_unknown_level_is_rejected_when_the_file_says_reject()
    {
        var model = CompiledModel.Compile(Models.Pump(unknown: UnknownLevelPolicy.Reject));
        var r = model.Score(Row(4.0, 60.0, "harbour"), ScoreSettings.Default);
        Assert.Equal(RowErrorKind.UnknownLevel, r.Error.Kind);
        Assert.Contains("'harbour' is not a level", RowMessages.Describe(model, r.Error), StringComparison.Ordinal);
    }

    [Fact]
    public void An_unknown_level_scores_as_the_reference_with_a_warning_when_the_file_says_reference()
    {
        var model = CompiledModel.Compile(Models.Pump(unknown: UnknownLevelPolicy.Reference));
        var warnings = new RowWarning[model.MaxWarningsPerRow];
        var r = model.Score(Row(4.0, 60.0, "harbour"), ScoreSettings.Default, default, warnings);
        var reference = model.Score(Row(4.0, 60.0, "north"), ScoreSettings.Default);
        Assert.Equal(reference.Eta, r.Eta);
        Assert.Equal(RowWarningKind.UnknownLevelAsReference, warnings[0].Kind);
        Assert.Contains("'harbour' is not a known level; scored as the reference level 'north'", RowMessages.Describe(model, warnings[0]), StringComparison.Ordinal);
    }

    [Fact]
    public void Values_outside_the_training_range_score_with_an_extrapolation_warning()
    {
        var model = CompiledModel.Compile(Models.Pump());
        var warnings = new RowWarning[model.MaxWarningsPerRow];
        var r = model.Score(Row(20.0, 20.0, "north"), ScoreSettings.Default, default, warnings);
        Assert.False(r.Failed);
        Assert.Equal(2, r.WarningCount);
        Assert.Equal(RowWarningKind.AboveTrainingRange, warnings[0].Kind);
        Assert.Equal(RowWarningKind.BelowTrainingRange, warnings[1].Kind);
        Assert.Equal("vibration=20 is above the training maximum 12 (extrapolation)", RowMessages.Describe(model, warnings[0]));
    }

    [Fact]
    public void A_standard_error_above_the_training_maximum_warns_of_hidden_extrapolation()
    {
        var model = CompiledModel.Compile(Models.Pump(maxSe: 0.15));
        var warnings = new RowWarning[model.MaxWarningsPerRow];
        var inside = model.Score(Row(1.0, 55.0, "north"), ScoreSettings.Default, default, warnings);
        Assert.Equal(0, inside.WarningCount);
        var outside = model.Score(Row(10.0, 75.0, "river"), ScoreSettings.Default, default, warnings);
        Assert.Equal(RowWarningKind.HiddenExtrapolation, warnings[outside.WarningCount - 1].Kind);
    }

    [Theory]
    [InlineData(0.0)]
    [InlineData(-1.0)]
    public void A_value_outside_the_domain_of_the_transform_is_an_error_naming_the_feature(double vibration)
    {
        var model = CompiledModel.Compile(Models.Pump());
        var r = model.Score(Row(vibration, 60.0, "north"), ScoreSettings.Default);
        Assert.Equal(RowErrorKind.OutsideTransformDomain, r.Error.Kind);
        Assert.Equal("vibration", RowMessages.Field(model, r.Error));
        Assert.Contains("log needs a value above 0", RowMessages.Describe(model, r.Error), StringComparison.Ordinal);
    }

    [Fact]
    public void Text_for_a_numeric_feature_and_infinity_are_errors()
    {
        var model = CompiledModel.Compile(Models.Pump());
        Assert.Equal(RowErrorKind.ExpectedNumber, model.Score(Row("high", 60.0, "north"), ScoreSettings.Default).Error.Kind);
        Assert.Equal(RowErrorKind.NotFinite, model.Score(Row(double.PositiveInfinity, 60.0, "north"), ScoreSettings.Default).Error.Kind);
    }

    [Fact]
    public void A_feature_given_twice_is_an_error()
    {
        var model = CompiledModel.Compile(Models.Pump());
        var r = model.Score([new("vibration", 2.0), new("temp", 60.0), new("site", "north"), new("vibration", 3.0)], ScoreSettings.Default);
        Assert.Equal(RowErrorKind.DuplicateFeature, r.Error.Kind);
    }

    [Fact]
    public void A_bad_row_does_not_affect_the_rows_around_it()
    {
        var model = CompiledModel.Compile(Models.Pump());
        var good = Row(3.0, 60.0, "east");
        var before = model.Score(good, ScoreSettings.Default);
        Assert.True(model.Score(Row(-5.0, 60.0, "east"), ScoreSettings.Default).Failed);
        var after = model.Score(good, ScoreSettings.Default);
        Assert.Equal(before.Eta, after.Eta);
        Assert.Equal(before.Se, after.Se);
    }

    [Fact]
    public void Prior_correction_shifts_only_the_intercept_by_the_King_Zeng_amount()
    {
        // King & Zeng (2001), eq. for the prior-corrected intercept: β0 − ln[((1−τ)/τ)·(ȳ/(1−ȳ))].
        // ȳ = 0.5 (balanced training sample), τ = 0.05: ln(19) = 2.944438979166440 (hand calculation).
        var plain = CompiledModel.Compile(Models.Pump());
        var corrected = CompiledModel.Compile(Models.Pump(sampling: new SamplingSpec(0.5, 0.05)));
        Assert.Equal(-Math.Log(19), corrected.InterceptCorrection, 15);
        Assert.Equal(-3 - 2.944438979166440, corrected.Coefficients[0], 12);
        Assert.Equal(plain.Coefficients[1..].ToArray(), corrected.Coefficients[1..].ToArray());
        var row = Row(3.0, 60.0, "east");
        Assert.Equal(plain.Score(row, ScoreSettings.Default).Eta - Math.Log(19), corrected.Score(row, ScoreSettings.Default).Eta, 12);
    }

    [Fact]
    public void Without_a_threshold_the_flag_is_absent_and_without_covariance_there_is_no_band()
    {
        var doc = Models.Pump(threshold: null) with { Covariance = null };
        var model = CompiledModel.Compile(doc);
        var r = model.Score(Row(3.0, 60.0, "east"), ScoreSettings.Default);
        Assert.Null(r.FlagValue);
        Assert.False(model.HasCovariance);
        Assert.True(double.IsNaN(r.Se) && double.IsNaN(r.Lower) && double.IsNaN(r.Upper));
        Assert.False(double.IsNaN(r.Probability));
    }

    [Fact]
    public void A_categorical_level_written_as_a_number_matches_a_numeric_value()
    {
        var doc = Models.Pump() with
        {
            Features = [.. Models.Pump().Features.Select(f => f.Name == "site" ? f with { Levels = ["1", "2", "3"], Reference = "1" } : f)],
            Terms = [.. Models.Pump().Terms.Select(t => t with { Factors = [.. t.Factors.Select(x => x.Level is null ? x : x with { Level = x.Level == "east" ? "2" : "3" })] })],
        };
        var model = CompiledModel.Compile(doc);
        Assert.Equal(model.Score(Row(3.0, 60.0, "3"), ScoreSettings.Default).Eta, model.Score(Row(3.0, 60.0, 3.0), ScoreSettings.Default).Eta);
        Assert.Equal(RowErrorKind.ExpectedLevel, model.Score(Row(3.0, 60.0, 7.0), ScoreSettings.Default).Error.Kind);
    }

    [Fact]
    public void A_singular_covariance_still_gives_the_exact_quadratic_form()
    {
        // V = a·aᵀ with a = (1, 2, 0, 0, 0, 0): rank one, so se = |a·x|.
        var a = new[] { 1.0, 2, 0, 0, 0, 0 };
        var doc = Models.Pump() with { Covariance = [.. a.Select(ai => a.Select(aj => ai * aj).ToImmutableArray())] };
        var model = CompiledModel.Compile(doc);
        Assert.False(model.FactorIsTriangular);
        var r = model.Score(Row(4.0, 60.0, "north"), ScoreSettings.Default);
        Assert.Equal(Math.Abs(1 + (2 * Math.Log(4))), r.Se, 12);
    }

    [Fact]
    public void A_feature_no_term_uses_is_not_required_in_a_row()
    {
        var doc = Models.Pump(tempMissing: MissingPolicy.Reject);
        doc = doc with
        {
            Terms = [.. doc.Terms.Where(t => !t.Factors.Any(x => x.Feature == "temp"))],
            Covariance = Models.Diagonal(5, 0.01),
        };
        var model = CompiledModel.Compile(doc);
        var r = model.Score([new NamedValue("vibration", 2.0), new NamedValue("site", "east")], ScoreSettings.Default);
        Assert.False(r.Failed, r.Error.ToString());
    }
}

/// <summary>
/// Finite values so large that η or x'Vx leaves double precision (IEEE 754 binary64: the largest finite value is
/// 1.7976931348623157e308). No number computed from them means anything, so the row is an error naming the value.
/// </summary>
public sealed class OverflowTests
{
    private static readonly ScoreSettings Band = ScoreSettings.Default;

    [Fact]
    public void A_value_whose_standard_error_overflows_is_a_row_error_naming_the_feature_not_an_infinite_band()
    {
        var model = CompiledModel.Compile(Models.Pump());
        // temp enters as (temp − 55)/10 with variance 0.01: x'Vx = (1.7e307)²·0.01 overflows, η = 0.3·1.7e307 does not.
        var r = model.Score([new("vibration", 4.0), new("temp", 1.7e308), new("site", "east")], Band);
        Assert.True(r.Failed);
        Assert.Equal(RowErrorKind.Overflow, r.Error.Kind);
        Assert.Equal("temp", RowMessages.Field(model, r.Error));
        Assert.Contains("1.7E+308", RowMessages.Describe(model, r.Error), StringComparison.Ordinal);
        Assert.True(double.IsNaN(r.Se) && double.IsNaN(r.Lower) && double.IsNaN(r.Probability));

        // Without a band only η is computed, and it is finite: the row is scored (with its extrapolation warning).
        var point = model.Score([new("vibration", 4.0), new("temp", 1.7e308), new("site", "east")], ScoreSettings.PointOnly);
        Assert.False(point.Failed);
        Assert.Equal(1.0, point.Probability);
    }

    [Fact]
    public void A_design_whose_linear_predictor_overflows_is_a_row_error_even_without_a_band()
    {
        var model = CompiledModel.Compile(Models.Pump());
        // 0.8·1.7e308 + 0.3·1.7e308 + 0.25·1.7e308 = 2.3e308 > 1.797e308.
        var r = model.ScoreDesign([1, 1.7e308, 1.7e308, 0, 0, 1.7e308], ScoreSettings.PointOnly);
        Assert.Equal(RowErrorKind.Overflow, r.Error.Kind);
        Assert.Equal("the linear predictor or its standard error overflows double precision", RowMessages.Describe(model, r.Error));
    }

    [Fact]
    public void The_batch_path_names_the_overflowing_row_and_scores_its_neighbours_as_one_by_one()
    {
        var model = CompiledModel.Compile(Models.Pump());
        // Sixteen rows: a block of eight that all overflow, then a block mixing overflowing and ordinary rows.
        var features = new List<double>();
        for (var i = 0; i < 16; i++)
        {
            var huge = i < 8 || i % 3 == 0;
            features.AddRange([4.0 + (i * 0.1), huge ? (i % 2 == 0 ? 1.7e308 : -1.7e308) : 50 + i, 1]);
        }

        var results = new ScoredRow[16];
        model.ScoreBatch(features.ToArray(), results, Band);
        for (var i = 0; i < 16; i++)
        {
            var one = model.ScoreFeatures(features.ToArray().AsSpan(i * 3, 3), Band);
            Assert.Equal(one.Error.Kind, results[i].Error.Kind);
            if (i < 8 || i % 3 == 0)
            {
                Assert.Equal(RowErrorKind.Overflow, results[i].Error.Kind);
                Assert.Equal("temp", RowMessages.Field(model, results[i].Error));
            }
            else
            {
                Assert.False(results[i].Failed);
                Assert.Equal(one.Probability, results[i].Probability, 14);
                Assert.Equal(one.Se, results[i].Se, 14);
            }
        }
    }
}

/// <summary>Which contributions a result lists and in which order: one rule for every transport.</summary>
public sealed class ContributionOrderTests
{
    [Fact]
    public void The_intercept_is_never_listed_all_keeps_term_order_and_top_n_ranks_by_size_with_ties_in_term_order()
    {
        var model = CompiledModel.Compile(Models.Pump());
        // Terms: (intercept), log(vibration), temp, site=east, site=river, log(vibration):site=river.
        double[] c = [-3, 0.5, -0.9, 0, 0.9, 0.2];
        var order = new int[model.TermCount];

        Assert.Equal(5, model.OrderContributions(c, 0, order));
        Assert.Equal([1, 2, 3, 4, 5], order[..5]);

        Assert.Equal(3, model.OrderContributions(c, 3, order));
        Assert.Equal([2, 4, 1], order[..3]); // |−0.9| and |0.9| tie: term order; the intercept's −3 is not a contribution

        Assert.Equal(5, model.OrderContributions(c, 50, order));
        Assert.Equal([2, 4, 1, 5, 3], order[..5]); // all, by size: 0.9, 0.9 (term order), 0.5, 0.2, 0
        Assert.Equal(0, model.OrderContributions(c, -1, order));
    }
}
