namespace Scorer.Statistics;

/// <summary>R's sample quantile of type 7 (the default of <c>stats::quantile</c>), copied expression for expression.</summary>
internal static class SampleQuantile
{
    /// <summary>
    /// The type-7 quantile of ascending <paramref name="sorted"/> at <paramref name="probability"/>, as
    /// <c>stats:::quantile.default</c> computes it: index = 1 + (n − 1)·prob, lo = ⌊index⌋, hi = ⌈index⌉ (1-based),
    /// q = x[lo], and, when index &gt; lo and x[hi] ≠ x[lo], q = (1 − h)·x[lo] + h·x[hi] with h = index − lo.
    /// </summary>
    public static double Type7(ReadOnlySpan<double> sorted, double probability)
    {
        var index = 1.0 + (sorted.Length - 1) * probability;
        var lo = Math.Floor(index);
        var hi = Math.Ceiling(index);
        var q = sorted[(int)lo - 1];
        var upper = sorted[(int)hi - 1];
        if (index > lo && upper != q)
        {
            var h = index - lo;
            q = (1.0 - h) * q + h * upper;
        }

        return q;
    }
}
