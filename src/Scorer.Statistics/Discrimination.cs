using Scorer.Engine.Numerics;

namespace Scorer.Statistics;

/// <summary>
/// Discrimination: the AUC as the Mann–Whitney statistic with ties counted one half, its DeLong, DeLong &amp;
/// Clarke-Pearson (1988) variance, and the paired DeLong test. The placements come from one sort and the midranks of
/// tied groups (Sun &amp; Xu 2014), so each call takes O(N log N) time and O(N) memory. Events (outcome 1) are the
/// "cases" whose scores are expected to be higher.
/// </summary>
public static class Discrimination
{
    /// <summary>
    /// The AUC of <paramref name="score"/> for <paramref name="outcome"/>, its DeLong standard error, and the interval
    /// estimate ± z·se clamped to [0, 1], z = Φ⁻¹((1 + level)/2). Every field is NaN when there are no events or no
    /// non-events; Se and the interval are NaN when there are fewer than two of either.
    /// </summary>
    /// <exception cref="ArgumentException">Lengths differ, a score is NaN, or an outcome is not 0 or 1.</exception>
    /// <exception cref="ArgumentOutOfRangeException"><paramref name="level"/> is not strictly between 0 and 1.</exception>
    public static AucEstimate Auc(ReadOnlySpan<double> score, ReadOnlySpan<byte> outcome, double level = 0.95)
    {
        Guard.SameLength(score.Length, outcome.Length, nameof(outcome), nameof(score));
        Guard.Scores(score, nameof(score));
        Guard.Outcomes(outcome, nameof(outcome));
        var z = Quantiles.TwoSidedZ(level);
        var keys = score.ToArray();
        var labels = outcome.ToArray();
        Array.Sort(keys, labels);
        return FromSorted(keys, labels, z);
    }

    /// <summary>
    /// The paired DeLong test of two scores on the same cases: AUC difference a − b, its standard error from the 2×2
    /// DeLong covariance matrix, z, two-sided p, and the interval difference ∓ z·se (see <see cref="PairedAucComparison"/>
    /// for se = 0 and NaN). Every field is NaN when there are no events or no non-events.
    /// </summary>
    /// <exception cref="ArgumentException">Lengths differ, a score is NaN, or an outcome is not 0 or 1.</exception>
    /// <exception cref="ArgumentOutOfRangeException"><paramref name="level"/> is not strictly between 0 and 1.</exception>
    public static PairedAucComparison Compare(ReadOnlySpan<double> a, ReadOnlySpan<double> b, ReadOnlySpan<byte> outcome, double level = 0.95)
    {
        Guard.SameLength(a.Length, b.Length, nameof(b), nameof(a));
        Guard.SameLength(a.Length, outcome.Length, nameof(outcome), nameof(a));
        Guard.Scores(a, nameof(a));
        Guard.Scores(b, nameof(b));
        Guard.Outcomes(outcome, nameof(outcome));
        var zCrit = Quantiles.TwoSidedZ(level);
        var total = outcome.Length;
        var cases = Guard.Events(outcome);
        var controls = total - cases;
        if (cases == 0 || controls == 0)
        {
            return new PairedAucComparison(double.NaN, double.NaN, double.NaN, double.NaN, double.NaN, double.NaN, double.NaN, double.NaN);
        }

        var keys = new double[total];
        var order = new int[total];
        var sortedOutcome = new byte[total];
        var sortedPlacement = new double[total];
        var placementA = new double[total];
        var placementB = new double[total];
        var aucA = PlacementsByRow(a, outcome, cases, controls, keys, order, sortedOutcome, sortedPlacement, placementA);
        var aucB = PlacementsByRow(b, outcome, cases, controls, keys, order, sortedOutcome, sortedPlacement, placementB);
        var difference = aucA - aucB;

        // Var(A − B) = (S10_aa + S10_bb − 2 S10_ab)/m + (S01_aa + S01_bb − 2 S01_ab)/n, evaluated as the sample variance
        // of the placement differences, which is the same quantity without the cancellation.
        double sum10 = 0.0, sum01 = 0.0;
        for (var i = 0; i < total; i++)
        {
            var d = placementA[i] - placementB[i] - difference;
            if (outcome[i] == 1)
            {
                sum10 += d * d;
            }
            else
            {
                sum01 += d * d;
            }
        }

        var variance = sum10 / (cases - 1) / cases + sum01 / (controls - 1) / controls;
        var se = Math.Sqrt(variance);
        var (zValue, p) = Tails.Wald(difference, se);
        return new PairedAucComparison(aucA, aucB, difference, se, zValue, p, difference - zCrit * se, difference + zCrit * se);
    }

    /// <summary>The AUC and DeLong interval of scores sorted ascending with their outcomes carried along.</summary>
    internal static AucEstimate FromSorted(ReadOnlySpan<double> sortedScore, ReadOnlySpan<byte> sortedOutcome, double z)
    {
        var total = sortedScore.Length;
        var cases = Guard.Events(sortedOutcome);
        var controls = total - cases;
        if (cases == 0 || controls == 0)
        {
            return new AucEstimate(double.NaN, double.NaN, double.NaN, double.NaN);
        }

        var placement = new double[total];
        var auc = Placements(sortedScore, sortedOutcome, cases, controls, placement);
        double sum10 = 0.0, sum01 = 0.0;
        for (var t = 0; t < total; t++)
        {
            var d = placement[t] - auc;
            if (sortedOutcome[t] == 1)
            {
                sum10 += d * d;
            }
            else
            {
                sum01 += d * d;
            }
        }

        // DeLong: Var = S10/m + S01/n with S10, S01 the sample variances of the case and control placements.
        var variance = sum10 / (cases - 1) / cases + sum01 / (controls - 1) / controls;
        var se = Math.Sqrt(variance);
        return new AucEstimate(auc, se, Math.Max(0.0, auc - z * se), Math.Min(1.0, auc + z * se));
    }

    /// <summary>
    /// Sorts one score (into the scratch arrays), writes each row's placement into <paramref name="byRow"/>, and returns
    /// the AUC.
    /// </summary>
    private static double PlacementsByRow(
        ReadOnlySpan<double> score, ReadOnlySpan<byte> outcome, int cases, int controls,
        double[] keys, int[] order, byte[] sortedOutcome, double[] sortedPlacement, double[] byRow)
    {
        score.CopyTo(keys);
        for (var i = 0; i < order.Length; i++)
        {
            order[i] = i;
        }

        Array.Sort(keys, order);
        for (var t = 0; t < order.Length; t++)
        {
            sortedOutcome[t] = outcome[order[t]];
        }

        var auc = Placements(keys, sortedOutcome, cases, controls, sortedPlacement);
        for (var t = 0; t < order.Length; t++)
        {
            byRow[order[t]] = sortedPlacement[t];
        }

        return auc;
    }

    /// <summary>
    /// DeLong placements by midranks (Sun &amp; Xu 2014), walking the groups of tied scores of an ascending sort. For a
    /// case, V10 = (midrank among all − midrank among cases)/n, which equals (controls below + ½ controls tied)/n; for a
    /// control, V01 = 1 − (midrank among all − midrank among controls)/m = (cases above + ½ cases tied)/m. Both are
    /// formed from exact half-integer counts with one rounding. Returns the AUC = Σ V10/m = (R₁ − m(m+1)/2)/(mn), also
    /// from exact integer counts.
    /// </summary>
    private static double Placements(
        ReadOnlySpan<double> sortedScore, ReadOnlySpan<byte> sortedOutcome, int cases, int controls, Span<double> placement)
    {
        long twiceU = 0;
        long casesBefore = 0, controlsBefore = 0;
        var total = sortedScore.Length;
        var start = 0;
        while (start < total)
        {
            var end = start + 1;
            while (end < total && sortedScore[end] == sortedScore[start])
            {
                end++;
            }

            long tiedCases = 0;
            for (var t = start; t < end; t++)
            {
                tiedCases += sortedOutcome[t];
            }

            var tiedControls = end - start - tiedCases;
            var v10 = (2.0 * controlsBefore + tiedControls) / (2.0 * controls);
            var v01 = (2.0 * (cases - casesBefore - tiedCases) + tiedCases) / (2.0 * cases);
            for (var t = start; t < end; t++)
            {
                placement[t] = sortedOutcome[t] == 1 ? v10 : v01;
            }

            twiceU += tiedCases * (2 * controlsBefore + tiedControls);
            casesBefore += tiedCases;
            controlsBefore += tiedControls;
            start = end;
        }

        return twiceU / (2.0 * cases * controls);
    }
}
