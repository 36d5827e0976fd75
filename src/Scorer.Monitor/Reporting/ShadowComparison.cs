using System.Globalization;
using Scorer.Statistics;

namespace Scorer.Monitor.Reporting;

/// <summary>What to do with a shadow version, from its paired comparison with the live one.</summary>
public enum ShadowVerdict
{
    Undecided,
    Promote,
    KeepLive,
}

/// <summary>
/// A shadow version against the live one on the same labelled rows: paired differences in log loss and Brier score
/// (live minus shadow; METHODS §9, cases independent) and the paired DeLong test of the AUC difference (shadow minus live).
/// </summary>
/// <remarks><see cref="Capped"/>: the window held more pairs than <see cref="MonitorOptions.ShadowPairs"/>; the comparison is over its most recent ones.</remarks>
public sealed record ShadowComparisonView(string Version, int Paired, PairedLossComparison? LogLoss, PairedLossComparison? Brier, PairedAucComparison? Auc,
    ShadowVerdict Verdict, string Reason, bool Capped = false)
{
    public string Recommendation => Verdict switch
    {
        ShadowVerdict.Promote => "promote",
        ShadowVerdict.KeepLive => "keep-live",
        _ => "undecided",
    };

    /// <summary>
    /// Compares on the pairs: promote when the log loss difference's interval lies above 0 and the AUC's does not lie
    /// below 0; keep live when the log loss interval lies below 0 or the AUC's lies below 0; otherwise undecided.
    /// </summary>
    public static ShadowComparisonView Compare(string version, IReadOnlyList<Store.PairedOutcome> pairs, double level, int minEvents, bool capped = false)
    {
        var live = new double[pairs.Count];
        var shadow = new double[pairs.Count];
        var y = new byte[pairs.Count];
        var events = 0;
        for (var i = 0; i < pairs.Count; i++)
        {
            (live[i], shadow[i], y[i]) = (pairs[i].LiveProbability, pairs[i].ShadowProbability, pairs[i].Outcome);
            events += y[i];
        }

        if (events < minEvents || pairs.Count - events < minEvents)
        {
            return new ShadowComparisonView(version, pairs.Count, null, null, null, ShadowVerdict.Undecided,
                $"Too few paired outcomes to compare: {events} events and {pairs.Count - events} non-events; at least {minEvents} of each are needed.", capped);
        }

        var logLoss = PairedLoss.LogLoss(live, shadow, y, level);
        var brier = PairedLoss.Brier(live, shadow, y, level);
        var auc = Discrimination.Compare(shadow, live, y, level);
        var (verdict, reason) = Decide(pairs.Count, logLoss, auc, level);
        if (capped)
        {
            reason += $" The window held more pairs; these are its most recent {pairs.Count} (Scorer:Monitor:ShadowPairs).";
        }

        return new ShadowComparisonView(version, pairs.Count, logLoss, brier, auc, verdict, reason, capped);
    }

    /// <summary>
    /// The rule, from the paired statistics: keep the live version when the shadow's log loss is shown higher (the
    /// difference live − shadow has its interval wholly below 0) or its AUC shown lower (shadow − live wholly below 0);
    /// otherwise promote when its log loss is shown lower (the interval wholly above 0); otherwise undecided. An interval
    /// that touches 0 shows nothing; one that cannot be computed (NaN) shows nothing either.
    /// </summary>
    public static (ShadowVerdict Verdict, string Reason) Decide(int paired, PairedLossComparison logLoss, PairedAucComparison auc, double level)
    {
        var pct = (level * 100).ToString("0.#", CultureInfo.InvariantCulture) + "%";
        string F(double x) => x.ToString("0.####", CultureInfo.InvariantCulture);
        var lossText = $"log loss live {F(logLoss.MeanA)} vs shadow {F(logLoss.MeanB)} (difference {F(logLoss.Difference)}, {pct} interval {F(logLoss.Lower)} to {F(logLoss.Upper)})";
        var aucText = $"AUC shadow {F(auc.AucA)} vs live {F(auc.AucB)} (difference {F(auc.Difference)}, {pct} interval {F(auc.Lower)} to {F(auc.Upper)})";
        if (logLoss.Upper < 0 || auc.Upper < 0)
        {
            return (ShadowVerdict.KeepLive, $"Keep the live version: the shadow does worse on {paired} paired outcomes: {lossText}; {aucText}.");
        }

        if (logLoss.Lower > 0)
        {
            return (ShadowVerdict.Promote, $"Promote: the shadow has the lower log loss on {paired} paired outcomes, and its AUC is not worse: {lossText}; {aucText}.");
        }

        return (ShadowVerdict.Undecided, $"Undecided: no difference shown yet on {paired} paired outcomes: {lossText}; {aucText}.");
    }
}
