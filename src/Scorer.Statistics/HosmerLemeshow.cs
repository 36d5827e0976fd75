namespace Scorer.Statistics;

/// <summary>
/// The Hosmer–Lemeshow (1980) test over groups of risk formed exactly as R's
/// <c>cut(p, unique(quantile(p, seq(0, 1, 1/g))), include.lowest = TRUE)</c>: breaks are the type-7 quantiles at
/// k·(1/g), k = 0..g; tied breaks are merged; the groups are [b₀, b₁], (b₁, b₂], ..., closed on the right. Breaks that
/// fall between the same two neighbouring values (possible only when n is small) would give an empty group, which is
/// left out. The degrees of freedom are the number of groups, the convention for external validation data (Hosmer,
/// Lemeshow &amp; Sturdivant 2013, Applied Logistic Regression, 3rd ed.); in-sample data would use groups − 2.
/// </summary>
public static class HosmerLemeshow
{
    /// <summary>
    /// The test with <paramref name="groups"/> quantile groups; null when the groups number fewer than two (for
    /// example, every p is equal, or there are no cases).
    /// </summary>
    /// <exception cref="ArgumentException">Lengths differ, a p is NaN or outside [0, 1], or an outcome is not 0 or 1.</exception>
    /// <exception cref="ArgumentOutOfRangeException"><paramref name="groups"/> is less than 2.</exception>
    public static HosmerLemeshowTest? Test(ReadOnlySpan<double> probability, ReadOnlySpan<byte> outcome, int groups = 10)
    {
        Guard.SameLength(probability.Length, outcome.Length, nameof(outcome), nameof(probability));
        Guard.Probabilities(probability, nameof(probability));
        Guard.Outcomes(outcome, nameof(outcome));
        ArgumentOutOfRangeException.ThrowIfLessThan(groups, 2);
        var keys = probability.ToArray();
        var labels = outcome.ToArray();
        Array.Sort(keys, labels);
        return FromSorted(keys, labels, groups);
    }

    /// <summary>The test for probabilities sorted ascending with their outcomes carried along.</summary>
    internal static HosmerLemeshowTest? FromSorted(ReadOnlySpan<double> sorted, ReadOnlySpan<byte> outcome, int groups)
    {
        var n = sorted.Length;
        if (n == 0)
        {
            return null;
        }

        // R: seq(0, 1, by) is from + (0:n)·by, capped at `to`; quantile(type = 7); unique() of the sorted breaks.
        var by = 1.0 / groups;
        var breaks = new List<double>(groups + 1);
        for (var k = 0; k <= groups; k++)
        {
            var q = SampleQuantile.Type7(sorted, Math.Min(k * by, 1.0));
            if (breaks.Count == 0 || q != breaks[^1])
            {
                breaks.Add(q);
            }
        }

        var intervals = breaks.Count - 1;
        if (intervals < 2)
        {
            return null;
        }

        var table = new List<RiskGroup>(intervals);
        var statistic = 0.0;
        var t = 0;
        for (var g = 0; g < intervals; g++)
        {
            // Interval g holds b_g < p ≤ b_{g+1}; the first also holds p = b_0 (include.lowest), and the sort puts every
            // p at or below the last break.
            var upper = breaks[g + 1];
            var start = t;
            var observed = 0;
            var expected = 0.0;
            while (t < n && (sorted[t] <= upper || g == intervals - 1))
            {
                observed += outcome[t];
                expected += sorted[t];
                t++;
            }

            var count = t - start;
            if (count == 0)
            {
                continue;
            }

            table.Add(new RiskGroup(count, observed, expected, sorted[start], sorted[t - 1]));
            var diff = observed - expected;
            statistic += diff * diff / (expected * (count - expected) / count);
        }

        if (table.Count < 2)
        {
            return null;
        }

        var df = table.Count;
        return new HosmerLemeshowTest(statistic, df, Tails.ChiSquaredUpper(statistic, df), table);
    }
}
