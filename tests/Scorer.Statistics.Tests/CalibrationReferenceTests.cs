using Scorer.Statistics;
using Xunit.Abstractions;

namespace Scorer.Statistics.Tests;

/// <summary>
/// <see cref="CalibrationStatistics.Compute"/> on the four reference cases of tests/reference/calibration, field by
/// field against the values R (glm, pROC, quantile/cut, pchisq), sklearn, statsmodels and scipy wrote.
/// </summary>
public sealed class CalibrationReferenceTests(ITestOutputHelper output)
{
    public static TheoryData<string> Cases => ReferenceCase.Names;

    private readonly Near near = new(output);

    private static CalibrationReport Report(ReferenceCase c) => CalibrationStatistics.Compute(c.P, c.Y);

    [Theory]
    [MemberData(nameof(Cases))]
    public void Counts_and_observed_over_expected_agree_with_the_reference(string name)
    {
        var c = ReferenceCase.Load(name);
        var r = Report(c);
        // n, events: sums (statistics.py, agreeing with R); expected: numpy sum of p.
        Assert.Equal(c.Integer("n"), r.Labelled);
        Assert.Equal(c.Integer("events"), r.Events);
        near.Relative(c.Number("expected"), r.Expected, 1e-12, "expected");
        // O/E and exp(ln(O/E) ± qnorm(0.975)/√O): the formula evaluated in statistics.py.
        Assert.NotNull(r.ObservedExpected);
        var oe = r.ObservedExpected.Value;
        near.Relative(c.Number("oe"), oe.Estimate, 1e-10, "oe");
        near.Relative(c.Number("oe_lower"), oe.Lower, 1e-10, "oe_lower");
        near.Relative(c.Number("oe_upper"), oe.Upper, 1e-10, "oe_upper");
    }

    [Theory]
    [MemberData(nameof(Cases))]
    public void Calibration_intercept_and_slope_agree_with_R_glm(string name)
    {
        var c = ReferenceCase.Load(name);
        var r = Report(c);
        // R stats::glm(y ~ 1 + offset(qlogis(p)), binomial) and glm(y ~ qlogis(p), binomial), summary.glm SEs, and
        // estimate ∓ qnorm(0.975)·SE (make-cases.R). On pima-cloglog glm stops ~5e-10 from the optimum (README), so its
        // slope fields get 1e-7.
        var tol = 1e-8;
        var slopeTol = name == "pima-cloglog" ? 1e-7 : 1e-8;
        Assert.NotNull(r.CalibrationIntercept);
        var a = r.CalibrationIntercept.Value;
        near.Relative(c.Number("cal_intercept"), a.Estimate, tol, "cal_intercept");
        near.Relative(c.Number("cal_intercept_se"), a.Se, tol, "cal_intercept_se");
        near.Relative(c.Number("cal_intercept_lower"), a.Lower, tol, "cal_intercept_lower");
        near.Relative(c.Number("cal_intercept_upper"), a.Upper, tol, "cal_intercept_upper");
        Assert.NotNull(r.CalibrationSlope);
        Assert.NotNull(r.CalibrationSlopeIntercept);
        var b = r.CalibrationSlope.Value;
        near.Relative(c.Number("cal_slope_intercept"), r.CalibrationSlopeIntercept.Value, slopeTol, "cal_slope_intercept");
        near.Relative(c.Number("cal_slope"), b.Estimate, slopeTol, "cal_slope");
        near.Relative(c.Number("cal_slope_se"), b.Se, slopeTol, "cal_slope_se");
        near.Relative(c.Number("cal_slope_lower"), b.Lower, slopeTol, "cal_slope_lower");
        near.Relative(c.Number("cal_slope_upper"), b.Upper, slopeTol, "cal_slope_upper");
    }

    [Theory]
    [MemberData(nameof(Cases))]
    public void Spiegelhalter_z_and_p_agree_with_the_formula_in_R_and_scipy(string name)
    {
        var c = ReferenceCase.Load(name);
        var r = Report(c);
        // Spiegelhalter (1986) z evaluated in Python and R (agreeing to 1e-12); p = 2·scipy.stats.norm.cdf(−|z|).
        Assert.NotNull(r.Spiegelhalter);
        near.Relative(c.Number("spiegelhalter_z"), r.Spiegelhalter.Z, 1e-9, "spiegelhalter_z");
        near.Relative(c.Number("spiegelhalter_p"), r.Spiegelhalter.P, 1e-9, "spiegelhalter_p");
    }

    [Theory]
    [MemberData(nameof(Cases))]
    public void Hosmer_Lemeshow_groups_statistic_and_p_agree_with_R_quantile_cut_and_pchisq(string name)
    {
        var c = ReferenceCase.Load(name);
        var hl = Report(c).HosmerLemeshow;
        // Groups: R cut(p, unique(quantile(p, seq(0, 1, 0.1))), include.lowest = TRUE); H: Hosmer & Lemeshow (1980)
        // evaluated in R; p: R pchisq(H, df, lower.tail = FALSE) (make-cases.R).
        Assert.NotNull(hl);
        Assert.Equal(c.Integer("hl_groups"), hl.Groups.Count);
        Assert.Equal(c.Integer("hl_df"), hl.Df);
        near.Relative(c.Number("hl_statistic"), hl.Statistic, 1e-9, "hl_statistic");
        near.Relative(c.Number("hl_p"), hl.P, 1e-9, "hl_p");
        var table = c.Objects("hl_table");
        for (var g = 0; g < table.Length; g++)
        {
            Assert.Equal(table[g].GetProperty("n").GetInt32(), hl.Groups[g].Count);
            Assert.Equal(table[g].GetProperty("observed").GetInt32(), hl.Groups[g].Observed);
            near.Relative(table[g].GetProperty("expected").GetDouble(), hl.Groups[g].Expected, 1e-9, $"hl_table[{g}].expected");
            Assert.Equal(table[g].GetProperty("p_min").GetDouble(), hl.Groups[g].MinPredicted);
            Assert.Equal(table[g].GetProperty("p_max").GetDouble(), hl.Groups[g].MaxPredicted);
        }

        // The standalone entry point gives the same test.
        var alone = HosmerLemeshow.Test(c.P, c.Y);
        Assert.NotNull(alone);
        Assert.Equal(hl.Statistic, alone.Statistic);
    }

    [Theory]
    [MemberData(nameof(Cases))]
    public void Brier_score_log_loss_and_Murphy_terms_agree_with_sklearn_and_the_Murphy_formula(string name)
    {
        var c = ReferenceCase.Load(name);
        var r = Report(c);
        // sklearn.metrics.brier_score_loss and log_loss(labels=[0, 1]); Murphy (1973) terms evaluated in statistics.py.
        near.Relative(c.Number("brier"), r.Brier, 1e-12, "brier");
        near.Relative(c.Number("log_loss"), r.LogLoss, 1e-12, "log_loss");
        near.Relative(c.Number("murphy_reliability"), r.Murphy.Reliability, 1e-12, "murphy_reliability");
        near.Relative(c.Number("murphy_resolution"), r.Murphy.Resolution, 1e-12, "murphy_resolution");
        near.Relative(c.Number("murphy_uncertainty"), r.Murphy.Uncertainty, 1e-12, "murphy_uncertainty");
        // The within-bin term is a small remainder of larger terms, so it is held to 1e-12 of the Brier score.
        near.Absolute(c.Number("murphy_within"), r.Murphy.WithinBin, 1e-12 * c.Number("brier"), "murphy_within");
    }

    [Theory]
    [MemberData(nameof(Cases))]
    public void Reliability_table_and_ece_agree_with_sklearn_calibration_curve_and_statsmodels_wilson(string name)
    {
        var c = ReferenceCase.Load(name);
        var r = Report(c);
        // sklearn.calibration.calibration_curve(n_bins=10, strategy="uniform") bins, statsmodels proportion_confint
        // (method="wilson"), ECE of Naeini, Cooper & Hauskrecht (2015) evaluated in statistics.py.
        var bins = c.Objects("reliability");
        Assert.Equal(bins.Length, r.Reliability.Count);
        for (var i = 0; i < bins.Length; i++)
        {
            var expected = bins[i];
            var actual = r.Reliability[i];
            Assert.Equal(expected.GetProperty("bin").GetInt32(), actual.Bin);
            Assert.Equal(expected.GetProperty("lower_edge").GetDouble(), actual.Lower);
            Assert.Equal(expected.GetProperty("upper_edge").GetDouble(), actual.Upper);
            Assert.Equal(expected.GetProperty("count").GetInt32(), actual.Count);
            near.Relative(expected.GetProperty("mean_predicted").GetDouble(), actual.MeanPredicted, 1e-12, $"reliability[{i}].mean_predicted");
            near.Relative(expected.GetProperty("observed_rate").GetDouble(), actual.ObservedRate, 1e-12, $"reliability[{i}].observed_rate");
            near.Relative(expected.GetProperty("wilson_lower").GetDouble(), actual.WilsonLower, 1e-12, $"reliability[{i}].wilson_lower");
            near.Relative(expected.GetProperty("wilson_upper").GetDouble(), actual.WilsonUpper, 1e-12, $"reliability[{i}].wilson_upper");
        }

        near.Relative(c.Number("ece"), r.Ece, 1e-12, "ece");
        // The standalone table is the report's table: the same bins and counts; the report adds p in ascending order
        // (it works on sorted rows), the table in the rows' order, so the means agree to rounding.
        var standalone = ReliabilityTable.Compute(c.P, c.Y);
        Assert.Equal(standalone.Count, r.Reliability.Count);
        for (var i = 0; i < standalone.Count; i++)
        {
            Assert.Equal(standalone[i].Count, r.Reliability[i].Count);
            Assert.Equal(standalone[i].Events, r.Reliability[i].Events);
            near.Relative(standalone[i].MeanPredicted, r.Reliability[i].MeanPredicted, 1e-14, $"standalone reliability[{i}].mean_predicted");
        }
    }

    [Theory]
    [MemberData(nameof(Cases))]
    public void Auc_equals_sklearn_and_its_DeLong_interval_agrees_with_pROC(string name)
    {
        var c = ReferenceCase.Load(name);
        var fromReport = Report(c).Auc;
        var alone = Discrimination.Auc(c.P, c.Y);
        Assert.NotNull(fromReport);
        Assert.Equal(alone, fromReport);
        // sklearn.metrics.roc_auc_score (equal to pROC's auc on these cases).
        near.Absolute(c.Number("auc"), alone.Estimate, 1e-15, "auc");
        // pROC var(roc, method = "delong") and ci.auc(method = "delong").
        near.Relative(c.Number("auc_se"), alone.Se, 1e-9, "auc_se");
        near.Relative(c.Number("auc_lower"), alone.Lower, 1e-9, "auc_lower");
        near.Relative(c.Number("auc_upper"), alone.Upper, 1e-9, "auc_upper");
    }

    [Theory]
    [MemberData(nameof(Cases))]
    public void Psi_of_the_second_half_against_R_quantile_edges_of_the_first_half_reproduces_the_reference(string name)
    {
        var c = ReferenceCase.Load(name);
        var half = c.Integer("psi_baseline_rows");
        Assert.Equal(c.Eta.Length / 2, half);
        var baseline = c.Eta.AsSpan(0, half);
        var current = c.Eta.AsSpan(half);

        // Edges: R quantile(eta[1:half], seq(0, 1, 0.1)[2:10], type = 7) (make-cases.R), exactly.
        var referenceEdges = c.Numbers("psi_edges");
        Assert.Equal(referenceEdges, PopulationStability.Edges(baseline));

        // Proportions of (−∞, e1], ..., (e9, ∞): statistics.py (numpy searchsorted), exactly; PSI with floor 1e-4.
        var counts = PopulationStability.Counts(referenceEdges, current);
        Assert.Equal(10, counts.Length);
        foreach (var v in current)
        {
            counts[PopulationStability.Bin(referenceEdges, v)]--;
        }

        Assert.All(counts, k => Assert.Equal(0L, k));
        counts = PopulationStability.Counts(referenceEdges, current);
        var size = current.Length;
        var actual = counts.Select(k => (double)k / size).ToArray();
        Assert.Equal(c.Numbers("psi_actual"), actual);
        var expected = Enumerable.Repeat(0.1, 10).ToArray();
        near.Relative(c.Number("psi"), PopulationStability.Index(expected, actual), 1e-12, "psi");
        near.Relative(c.Number("psi"), PopulationStability.IndexFromCounts(expected, counts), 1e-12, "psi from counts");
    }
}
