using Scorer.Statistics;

namespace Scorer.Statistics.Tests;

/// <summary>Degenerate inputs, bin-edge rules and argument checks.</summary>
public sealed class EdgeCaseTests
{
    [Fact]
    public void No_rows_give_a_report_with_null_tests_and_NaN_scores()
    {
        var r = CalibrationStatistics.Compute([], []);
        Assert.Equal(0, r.Labelled);
        Assert.Equal(0, r.Events);
        Assert.Equal(0.0, r.Expected);
        Assert.Null(r.ObservedExpected);
        Assert.Null(r.CalibrationIntercept);
        Assert.Null(r.CalibrationSlope);
        Assert.Null(r.CalibrationSlopeIntercept);
        Assert.Null(r.Spiegelhalter);
        Assert.Null(r.HosmerLemeshow);
        Assert.Null(r.Auc);
        Assert.True(double.IsNaN(r.Brier) && double.IsNaN(r.LogLoss) && double.IsNaN(r.Ece));
        Assert.True(double.IsNaN(r.Murphy.Reliability) && double.IsNaN(r.Murphy.WithinBin));
        Assert.Empty(r.Reliability);
    }

    [Fact]
    public void All_zero_outcomes_leave_the_ratio_fits_and_auc_null_but_keep_the_scores()
    {
        var c = ReferenceCase.Load("pima-logit");
        var y = new byte[c.P.Length];
        var r = CalibrationStatistics.Compute(c.P, y);
        Assert.Equal(0, r.Events);
        Assert.Null(r.ObservedExpected);
        Assert.Null(r.CalibrationIntercept);
        Assert.Null(r.CalibrationSlope);
        Assert.Null(r.Auc);
        Assert.NotNull(r.Spiegelhalter);
        Assert.NotNull(r.HosmerLemeshow);
        // Brier with y = 0 is mean p²; log loss is −mean ln(1 − p) (definitions).
        Assert.Equal(c.P.Average(p => p * p), r.Brier, 1e-15);
        Assert.Equal(-c.P.Average(p => Math.Log(1 - p)), r.LogLoss, 1e-13);
        // Murphy: no events, so the uncertainty and resolution are 0 and the reliability is the Brier minus within.
        Assert.Equal(0.0, r.Murphy.Uncertainty);
        Assert.Equal(0.0, r.Murphy.Resolution);
    }

    [Fact]
    public void A_single_row_gives_that_rows_scores_and_no_tests()
    {
        var r = CalibrationStatistics.Compute([0.25], [1]);
        Assert.Equal(1, r.Labelled);
        Assert.Equal(0.5625, r.Brier);
        Assert.Equal(-Math.Log(0.25), r.LogLoss, 1e-15);
        Assert.Equal(0.75, r.Ece, 1e-15);
        Assert.Null(r.HosmerLemeshow);
        Assert.Null(r.Auc);
        Assert.Null(r.CalibrationIntercept);
        Assert.NotNull(r.ObservedExpected);
        Assert.Equal(4.0, r.ObservedExpected.Value.Estimate);
        var bin = Assert.Single(r.Reliability);
        Assert.Equal(2, bin.Bin);
        Assert.Equal(1, bin.Events);
    }

    [Fact]
    public void Probabilities_of_exactly_zero_and_one_give_finite_losses_and_fits()
    {
        double[] p = [0.0, 1.0, 0.0, 1.0, 0.3, 0.6, 0.2, 0.9];
        byte[] y = [0, 1, 1, 0, 0, 1, 1, 0];
        var r = CalibrationStatistics.Compute(p, y);
        // Log loss clips p to [1e-15, 1 − 1e-15]: the two wrong certainties cost −ln(1e-15) and −ln(1 − (1 − 1e-15)).
        var expected = (-Math.Log(1e-15) - Math.Log(1 - (1 - 1e-15)) - Math.Log(0.7) - Math.Log(0.6) - Math.Log(0.2) - Math.Log(0.1)) / 8;
        Assert.Equal(expected, r.LogLoss, 1e-12);
        Assert.True(double.IsFinite(r.Brier));
        Assert.NotNull(r.CalibrationIntercept);
        Assert.True(double.IsFinite(r.CalibrationIntercept.Value.Estimate) && double.IsFinite(r.CalibrationIntercept.Value.Se));
        Assert.NotNull(r.CalibrationSlope);
        Assert.True(double.IsFinite(r.CalibrationSlope.Value.Estimate));
        Assert.NotNull(r.Auc);
    }

    [Fact]
    public void Constant_predictions_make_the_slope_and_the_Hosmer_Lemeshow_groups_unavailable()
    {
        var p = Enumerable.Repeat(0.3, 50).ToArray();
        var y = Enumerable.Range(0, 50).Select(i => (byte)(i % 3 == 0 ? 1 : 0)).ToArray();
        var r = CalibrationStatistics.Compute(p, y);
        Assert.Null(r.CalibrationSlope);
        Assert.Null(r.CalibrationSlopeIntercept);
        Assert.Null(r.HosmerLemeshow);
        // The intercept alone is still estimable: logit(17/50) − logit(0.3) (closed-form MLE of a constant offset).
        Assert.NotNull(r.CalibrationIntercept);
        Assert.Equal(Math.Log(17.0 / 33.0) - Math.Log(0.3 / 0.7), r.CalibrationIntercept.Value.Estimate, 1e-12);
        // All predictions tied: AUC = ½.
        Assert.Equal(0.5, r.Auc!.Estimate);
        // p = ½ everywhere zeroes Spiegelhalter's denominator.
        Assert.Null(CalibrationStatistics.Compute(Enumerable.Repeat(0.5, 10).ToArray(), y.Take(10).ToArray()).Spiegelhalter);
    }

    [Fact]
    public void Perfectly_separating_predictions_give_no_slope()
    {
        double[] p = [0.1, 0.2, 0.3, 0.7, 0.8, 0.9];
        byte[] y = [0, 0, 0, 1, 1, 1];
        var r = CalibrationStatistics.Compute(p, y);
        Assert.Null(r.CalibrationSlope);
        Assert.Equal(1.0, r.Auc!.Estimate);
    }

    [Fact]
    public void Reliability_bins_are_closed_on_the_right_at_the_linspace_edges()
    {
        // The README's sklearn rule: 0.1 → bin 0, 0.2 → bin 1, 0.3 (below e₃ = 0.30000000000000004) → bin 2, the next
        // double above e₃ → bin 3, 1.0 → bin 9, 0 → bin 0.
        Assert.Equal(0, ReliabilityTable.BinOf(0.1, 10));
        Assert.Equal(1, ReliabilityTable.BinOf(0.2, 10));
        Assert.Equal(2, ReliabilityTable.BinOf(0.3, 10));
        Assert.Equal(2, ReliabilityTable.BinOf(0.30000000000000004, 10));
        Assert.Equal(3, ReliabilityTable.BinOf(Math.BitIncrement(0.30000000000000004), 10));
        Assert.Equal(9, ReliabilityTable.BinOf(1.0, 10));
        Assert.Equal(0, ReliabilityTable.BinOf(0.0, 10));
        Assert.Equal(5, ReliabilityTable.BinOf(0.6000000000000001, 10));
        var r = CalibrationStatistics.Compute([0.2, 0.2], [0, 1]);
        // Murphy bins are closed on the left (floor rule), reliability bins on the right: 0.2 lands in Murphy bin 2
        // and reliability bin 1; the decomposition still adds up to the Brier score.
        Assert.Equal(1, Assert.Single(r.Reliability).Bin);
        Assert.Equal(r.Brier, r.Murphy.Reliability - r.Murphy.Resolution + r.Murphy.Uncertainty + r.Murphy.WithinBin, 1e-15);
    }

    [Fact]
    public void Wilson_interval_of_zero_events_starts_at_zero()
    {
        var z = Scorer.Engine.Numerics.Quantiles.TwoSidedZ(0.95);
        var w = ReliabilityTable.WilsonInterval(0, 10);
        Assert.Equal(0.0, w.Lower);
        // Upper end z²/(n + z²) when p̂ = 0 (the Wilson formula simplified).
        Assert.Equal(z * z / (10 + z * z), w.Upper, 1e-15);
    }

    [Fact]
    public void Wilson_interval_of_all_events_ends_at_one_and_mirrors_zero_events()
    {
        var all = ReliabilityTable.WilsonInterval(7, 7);
        var none = ReliabilityTable.WilsonInterval(0, 7);
        Assert.Equal(1.0, all.Upper);
        // The Wilson interval is symmetric under p̂ → 1 − p̂ (its formula).
        Assert.Equal(1.0 - none.Upper, all.Lower, 1e-15);
        Assert.True(double.IsNaN(ReliabilityTable.WilsonInterval(0, 0).Lower));
    }

    [Fact]
    public void Tied_predictions_merge_quantile_breaks_and_drop_the_empty_group()
    {
        // 25 rows each of p = 0.1, 0.2, 0.3, 0.4. R's quantile(p, seq(0, 1, 0.1)) (type 7, index 1 + 99·k/10) is
        // 0.1, 0.1, 0.1, 0.2, 0.2, 0.25, 0.3, 0.3, 0.4, 0.4, 0.4; unique() leaves 0.1, 0.2, 0.25, 0.3, 0.4, and cut()
        // gives [0.1, 0.2] (50 rows), (0.2, 0.25] (empty, left out), (0.25, 0.3] (25) and (0.3, 0.4] (25).
        var p = new[] { 0.1, 0.2, 0.3, 0.4 }.SelectMany(v => Enumerable.Repeat(v, 25)).ToArray();
        var events = new[] { 4, 6, 5, 12 };
        var y = Enumerable.Range(0, 100).Select(i => (byte)(i % 25 < events[i / 25] ? 1 : 0)).ToArray();
        var hl = HosmerLemeshow.Test(p, y);
        Assert.NotNull(hl);
        Assert.Equal([50, 25, 25], hl.Groups.Select(g => g.Count));
        Assert.Equal([10, 5, 12], hl.Groups.Select(g => g.Observed));
        Assert.Equal(3, hl.Df);
        Assert.Equal(0.1, hl.Groups[0].MinPredicted);
        Assert.Equal(0.2, hl.Groups[0].MaxPredicted);
        // H by the Hosmer–Lemeshow (1980) formula with E = 7.5, 7.5, 10; p = 1 − χ²₃ CDF (MathNet).
        var h = 2.5 * 2.5 / (7.5 * (1 - 7.5 / 50)) + 2.5 * 2.5 / (7.5 * (1 - 7.5 / 25)) + 2.0 * 2.0 / (10 * (1 - 10.0 / 25));
        Assert.Equal(h, hl.Statistic, 1e-12);
        Assert.Equal(1 - MathNet.Numerics.Distributions.ChiSquared.CDF(3, h), hl.P, 1e-12);
        // The same rows shuffled give the same test.
        var order = Enumerable.Range(0, 100).OrderBy(i => (i * 37) % 101).ToArray();
        var shuffled = HosmerLemeshow.Test(order.Select(i => p[i]).ToArray(), order.Select(i => y[i]).ToArray());
        Assert.Equal(hl.Statistic, shuffled!.Statistic, 1e-12);
    }

    [Fact]
    public void Population_stability_merges_tied_edges_and_floors_empty_bins()
    {
        double[] edges = [1.0, 2.0, 2.0, 3.0];
        Assert.Equal(0, PopulationStability.Bin(edges, 1.0));
        Assert.Equal(1, PopulationStability.Bin(edges, 2.0));
        Assert.Equal(2, PopulationStability.Bin(edges, 2.5));
        Assert.Equal(3, PopulationStability.Bin(edges, 3.5));
        Assert.Equal(3, PopulationStability.Bin(edges, double.PositiveInfinity));
        Assert.Equal([1L, 1L, 1L, 1L], PopulationStability.Counts(edges, [0.0, 2.0, 2.5, 9.0]));
        // Σ (a − e) ln(a/e) with the empty bin floored at 1e-4 (the README's PSI rule).
        var psi = PopulationStability.Index([0.5, 0.5], [1.0, 0.0]);
        Assert.Equal(0.5 * Math.Log(2.0) + (1e-4 - 0.5) * Math.Log(1e-4 / 0.5), psi, 1e-15);
        Assert.Equal(psi, PopulationStability.IndexFromCounts([0.5, 0.5], [7L, 0L]));
        Assert.True(double.IsNaN(PopulationStability.IndexFromCounts([0.5, 0.5], [0L, 0L])));
        Assert.Equal(0.0, PopulationStability.Index([0.2, 0.8], [0.2, 0.8]));
    }

    [Fact]
    public void Mismatched_lengths_throw_naming_the_parameter()
    {
        Assert.Equal("outcome", Assert.Throws<ArgumentException>(() => CalibrationStatistics.Compute([0.5, 0.5], [1])).ParamName);
        Assert.Equal("outcome", Assert.Throws<ArgumentException>(() => Discrimination.Auc([0.5, 0.5], [1])).ParamName);
        Assert.Equal("b", Assert.Throws<ArgumentException>(() => Discrimination.Compare([0.5], [0.5, 0.1], [1])).ParamName);
        Assert.Equal("outcome", Assert.Throws<ArgumentException>(() => Discrimination.Compare([0.5], [0.5], [1, 0])).ParamName);
        Assert.Equal("b", Assert.Throws<ArgumentException>(() => PairedLoss.LogLoss([0.5], [], [1])).ParamName);
        Assert.Equal("outcome", Assert.Throws<ArgumentException>(() => PairedLoss.Brier([0.5], [0.5], [])).ParamName);
        Assert.Equal("actual", Assert.Throws<ArgumentException>(() => PopulationStability.Index([0.5, 0.5], [1.0])).ParamName);
        Assert.Equal("actualCounts", Assert.Throws<ArgumentException>(() => PopulationStability.IndexFromCounts([1.0], [1L, 2L])).ParamName);
    }

    [Fact]
    public void Invalid_values_throw_naming_the_parameter()
    {
        Assert.Equal("probability", Assert.Throws<ArgumentException>(() => CalibrationStatistics.Compute([0.5, double.NaN], [1, 0])).ParamName);
        Assert.Equal("probability", Assert.Throws<ArgumentException>(() => CalibrationStatistics.Compute([1.5], [1])).ParamName);
        Assert.Equal("probability", Assert.Throws<ArgumentException>(() => CalibrationStatistics.Compute([-1e-300], [1])).ParamName);
        Assert.Equal("outcome", Assert.Throws<ArgumentException>(() => CalibrationStatistics.Compute([0.5], [2])).ParamName);
        Assert.Equal("level", Assert.Throws<ArgumentOutOfRangeException>(() => CalibrationStatistics.Compute([0.5], [1], level: 1.0)).ParamName);
        Assert.Equal("groups", Assert.Throws<ArgumentOutOfRangeException>(() => CalibrationStatistics.Compute([0.5], [1], groups: 1)).ParamName);
        Assert.Equal("score", Assert.Throws<ArgumentException>(() => Discrimination.Auc([double.NaN], [1])).ParamName);
        Assert.Equal("a", Assert.Throws<ArgumentException>(() => PairedLoss.LogLoss([2.0], [0.5], [1])).ParamName);
        Assert.Equal("edges", Assert.Throws<ArgumentException>(() => PopulationStability.Bin([2.0, 1.0], 0.5)).ParamName);
        Assert.Equal("value", Assert.Throws<ArgumentException>(() => PopulationStability.Bin([1.0], double.NaN)).ParamName);
        Assert.Equal("expected", Assert.Throws<ArgumentException>(() => PopulationStability.Index([-0.1], [0.1])).ParamName);
        Assert.Equal("floor", Assert.Throws<ArgumentOutOfRangeException>(() => PopulationStability.Index([0.1], [0.1], 0.0)).ParamName);
        Assert.Equal("baseline", Assert.Throws<ArgumentException>(() => PopulationStability.Edges([])).ParamName);
    }
}
