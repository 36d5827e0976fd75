using Scorer.Monitor.Reporting;
using Scorer.Statistics;
using Scorer.Store;

namespace Scorer.Monitor.Tests.Reporting;

/// <summary>
/// The promotion rule of a shadow version (docs/monitoring.md, "Shadow versus live"), each branch at its boundary, from
/// given paired statistics: log loss difference live − shadow, AUC difference shadow − live, each with its interval.
/// </summary>
public sealed class ShadowComparisonTests
{
    private static PairedLossComparison Loss(double lower, double upper) =>
        new(1000, 0.30, 0.30 - ((lower + upper) / 2), (lower + upper) / 2, (upper - lower) / 3.92, lower, upper, 0, 1);

    private static PairedAucComparison Auc(double lower, double upper) =>
        new(0.8 + ((lower + upper) / 2), 0.8, (lower + upper) / 2, (upper - lower) / 3.92, 0, 1, lower, upper);

    private static ShadowVerdict Verdict(PairedLossComparison loss, PairedAucComparison auc) => ShadowComparisonView.Decide(1000, loss, auc, 0.95).Verdict;

    [Fact]
    public void A_lower_log_loss_shown_and_an_AUC_not_shown_worse_promotes_the_shadow()
    {
        var (verdict, reason) = ShadowComparisonView.Decide(1000, Loss(0.001, 0.02), Auc(-0.01, 0.03), 0.95);
        Assert.Equal(ShadowVerdict.Promote, verdict);
        Assert.StartsWith("Promote: the shadow has the lower log loss on 1000 paired outcomes", reason, StringComparison.Ordinal);
        Assert.Contains("95% interval 0.001 to 0.02", reason, StringComparison.Ordinal);
    }

    [Fact]
    public void A_log_loss_interval_that_touches_0_shows_nothing_and_leaves_it_undecided()
    {
        Assert.Equal(ShadowVerdict.Undecided, Verdict(Loss(0, 0.02), Auc(-0.01, 0.03)));
        Assert.Equal(ShadowVerdict.Undecided, Verdict(Loss(-0.02, 0), Auc(-0.01, 0.03)));
        Assert.Equal(ShadowVerdict.Undecided, Verdict(Loss(-0.01, 0.01), Auc(-0.01, 0)));
    }

    [Fact]
    public void A_higher_log_loss_shown_keeps_the_live_version()
    {
        var (verdict, reason) = ShadowComparisonView.Decide(1000, Loss(-0.02, -0.001), Auc(-0.01, 0.03), 0.95);
        Assert.Equal(ShadowVerdict.KeepLive, verdict);
        Assert.StartsWith("Keep the live version: the shadow does worse on 1000 paired outcomes", reason, StringComparison.Ordinal);
    }

    [Fact]
    public void An_AUC_shown_lower_keeps_the_live_version_even_with_a_lower_log_loss()
    {
        // A better-calibrated shadow that ranks worse is not promoted: recalibration keeps the ranking, a refit must not lose it.
        Assert.Equal(ShadowVerdict.KeepLive, Verdict(Loss(0.001, 0.02), Auc(-0.05, -0.001)));
    }

    [Fact]
    public void An_AUC_interval_that_cannot_be_computed_shows_nothing_and_the_log_loss_decides()
    {
        var unknown = new PairedAucComparison(0.8, 0.8, 0, double.NaN, double.NaN, double.NaN, double.NaN, double.NaN);
        Assert.Equal(ShadowVerdict.Promote, Verdict(Loss(0.001, 0.02), unknown));
        Assert.Equal(ShadowVerdict.Undecided, Verdict(Loss(-0.01, 0.02), unknown));
    }

    [Fact]
    public void Fewer_than_MinEvents_events_or_non_events_among_the_pairs_is_undecided_saying_how_many_are_needed()
    {
        var pairs = Enumerable.Range(0, 200).Select(i => new PairedOutcome(0.1, 0.2, (byte)(i < 49 ? 1 : 0))).ToList();
        var view = ShadowComparisonView.Compare("2026.12.1", pairs, 0.95, minEvents: 50);
        Assert.Equal(ShadowVerdict.Undecided, view.Verdict);
        Assert.Equal("undecided", view.Recommendation);
        Assert.Null(view.LogLoss);
        Assert.Equal("Too few paired outcomes to compare: 49 events and 151 non-events; at least 50 of each are needed.", view.Reason);
    }

    [Fact]
    public void The_recommendation_words_are_promote_keep_live_and_undecided()
    {
        Assert.Equal("promote", new ShadowComparisonView("v", 0, null, null, null, ShadowVerdict.Promote, "").Recommendation);
        Assert.Equal("keep-live", new ShadowComparisonView("v", 0, null, null, null, ShadowVerdict.KeepLive, "").Recommendation);
        Assert.Equal("undecided", new ShadowComparisonView("v", 0, null, null, null, ShadowVerdict.Undecided, "").Recommendation);
    }
}
