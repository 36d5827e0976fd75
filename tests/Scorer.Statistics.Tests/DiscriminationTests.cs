using MathNet.Numerics.Distributions;
using Scorer.Engine.Numerics;
using Scorer.Statistics;
using Xunit.Abstractions;

namespace Scorer.Statistics.Tests;

/// <summary>The AUC, its DeLong variance and the paired DeLong test.</summary>
public sealed class DiscriminationTests(ITestOutputHelper output)
{
    private readonly Near near = new(output);

    [Fact]
    public void Paired_DeLong_of_a_monotone_transform_has_zero_difference_and_zero_se()
    {
        // pima-miscalibrated's p is plogis(−0.4 + 1.6·qlogis(p)) of pima-logit's rows (README), a monotone map, so the
        // rankings are the same and sklearn's AUC is unchanged (a cross-check of statistics.py).
        var logit = ReferenceCase.Load("pima-logit");
        var mis = ReferenceCase.Load("pima-miscalibrated");
        Assert.Equal(logit.Y, mis.Y);
        var cmp = Discrimination.Compare(logit.P, mis.P, logit.Y);
        near.Absolute(logit.Number("auc"), cmp.AucA, 1e-15, "auc a (sklearn)");
        near.Absolute(mis.Number("auc"), cmp.AucB, 1e-15, "auc b (sklearn)");
        Assert.Equal(0.0, cmp.Difference);
        Assert.Equal(0.0, cmp.Se);
        // Documented convention: se = 0 with difference 0 gives z = 0 and p = 1.
        Assert.Equal(0.0, cmp.Z);
        Assert.Equal(1.0, cmp.P);
        Assert.Equal(0.0, cmp.Lower);
        Assert.Equal(0.0, cmp.Upper);
    }

    [Fact]
    public void Paired_DeLong_of_logit_against_cloglog_agrees_with_the_direct_evaluation_of_the_DeLong_formulas()
    {
        var logit = ReferenceCase.Load("pima-logit");
        var cloglog = ReferenceCase.Load("pima-cloglog");
        Assert.Equal(logit.Y, cloglog.Y);
        var cmp = Discrimination.Compare(logit.P, cloglog.P, logit.Y);

        // Each AUC against sklearn roc_auc_score, each single-score variance against pROC's DeLong se.
        near.Absolute(logit.Number("auc"), cmp.AucA, 1e-15, "auc a (sklearn)");
        near.Absolute(cloglog.Number("auc"), cmp.AucB, 1e-15, "auc b (sklearn)");

        // The 2×2 DeLong covariance straight from its definition (DeLong et al. 1988), O(mn).
        var d = DirectDeLong.Evaluate(logit.P, cloglog.P, logit.Y);
        near.Relative(logit.Number("auc_se"), Math.Sqrt(d.VarA), 1e-9, "direct se a vs pROC");
        near.Relative(cloglog.Number("auc_se"), Math.Sqrt(d.VarB), 1e-9, "direct se b vs pROC");
        var se = Math.Sqrt(d.VarA + d.VarB - 2 * d.Cov);
        Assert.True(se > 0);
        near.Relative(d.AucA - d.AucB, cmp.Difference, 1e-12, "difference");
        near.Relative(se, cmp.Se, 1e-9, "se of difference");
        var z = (d.AucA - d.AucB) / se;
        near.Relative(z, cmp.Z, 1e-9, "z");
        // Two-sided p from MathNet's normal CDF, 2Φ(−|z|).
        near.Relative(2 * Normal.CDF(0, 1, -Math.Abs(z)), cmp.P, 1e-9, "p");
        var zc = Quantiles.TwoSidedZ(0.95);
        near.Relative(d.AucA - d.AucB - zc * se, cmp.Lower, 1e-9, "lower");
        near.Relative(d.AucA - d.AucB + zc * se, cmp.Upper, 1e-9, "upper");
    }

    [Fact]
    public void Auc_and_DeLong_variances_agree_with_the_direct_evaluation_under_heavy_ties()
    {
        // Scores rounded to one decimal give many ties across and within classes.
        var rng = new Random(20240);
        var n = 1500;
        var y = new byte[n];
        var a = new double[n];
        var b = new double[n];
        for (var i = 0; i < n; i++)
        {
            y[i] = (byte)(rng.NextDouble() < 0.3 ? 1 : 0);
            a[i] = Math.Round(rng.NextDouble() * 0.7 + 0.3 * y[i], 1);
            b[i] = Math.Round(0.5 * a[i] + 0.5 * rng.NextDouble(), 1);
        }

        var d = DirectDeLong.Evaluate(a, b, y);
        var auc = Discrimination.Auc(a, y);
        near.Relative(d.AucA, auc.Estimate, 1e-14, "auc");
        near.Relative(Math.Sqrt(d.VarA), auc.Se, 1e-12, "se");
        var cmp = Discrimination.Compare(a, b, y);
        near.Relative(d.AucB, cmp.AucB, 1e-14, "auc b");
        near.Relative(Math.Sqrt(d.VarA + d.VarB - 2 * d.Cov), cmp.Se, 1e-10, "se of difference");
    }

    [Fact]
    public void A_small_worked_case_with_a_tie_counts_the_tied_pair_one_half()
    {
        // Cases {0.5, 0.8}, controls {0.2, 0.5}: pairs won 1 + ½ + 1 + 1 = 3.5 of 4 (Mann–Whitney with ties ½).
        double[] s = [0.2, 0.5, 0.5, 0.8];
        byte[] y = [0, 0, 1, 1];
        var auc = Discrimination.Auc(s, y);
        Assert.Equal(0.875, auc.Estimate);
        // Placements by hand: V10 = (0.75, 1), V01 = (1, 0.75); S10 = S01 = 0.03125; Var = S10/2 + S01/2 = 0.03125.
        near.Relative(Math.Sqrt(0.03125), auc.Se, 1e-15, "se");
        Assert.Equal(1.0, auc.Upper);
        var d = DirectDeLong.Evaluate(s, s, y);
        near.Relative(Math.Sqrt(d.VarA), auc.Se, 1e-15, "se vs direct");
    }

    [Fact]
    public void Auc_without_both_classes_is_NaN_and_with_one_of_a_class_has_NaN_se()
    {
        var none = Discrimination.Auc([0.1, 0.2], [0, 0]);
        Assert.True(double.IsNaN(none.Estimate) && double.IsNaN(none.Se));
        var empty = Discrimination.Auc([], []);
        Assert.True(double.IsNaN(empty.Estimate));
        // One case and two controls: AUC defined (2 of 2 pairs won), S10 has no sample variance.
        var one = Discrimination.Auc([0.1, 0.2, 0.9], [0, 0, 1]);
        Assert.Equal(1.0, one.Estimate);
        Assert.True(double.IsNaN(one.Se) && double.IsNaN(one.Lower));
        var cmp = Discrimination.Compare([0.1, 0.2, 0.9], [0.3, 0.2, 0.1], [0, 0, 1]);
        Assert.Equal(1.0, cmp.Difference);
        Assert.True(double.IsNaN(cmp.Se) && double.IsNaN(cmp.Z) && double.IsNaN(cmp.P));
    }

    [Fact]
    public void Reversing_a_score_turns_the_auc_into_its_complement_with_the_same_se()
    {
        var c = ReferenceCase.Load("birthwt-probit");
        var reversed = c.P.Select(p => -p).ToArray();
        var forward = Discrimination.Auc(c.P, c.Y);
        var backward = Discrimination.Auc(reversed, c.Y);
        // sklearn roc_auc_score for the forward score; 1 − AUC for the reversed one.
        near.Absolute(1 - c.Number("auc"), backward.Estimate, 1e-15, "1 - auc");
        near.Relative(forward.Se, backward.Se, 1e-12, "se");
    }
}
