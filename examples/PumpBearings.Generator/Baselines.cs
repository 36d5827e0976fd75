using System.Collections.Immutable;
using Scorer.ModelFile;

namespace PumpBearings.Generator;

/// <summary>Training baselines: decile bins of a numeric column (tied edges merged) and level proportions.</summary>
internal static class Baselines
{
    /// <summary>
    /// Edges at the 10%, 20%, ..., 90% empirical quantiles (the smallest value with at least that share of the rows at or
    /// below it), optionally rounded, with tied edges merged; proportions counted over the bins (-inf, e1], ..., (ek, +inf).
    /// </summary>
    public static BinnedBaseline Deciles(IReadOnlyList<double> values, int? roundDigits = null)
    {
        var sorted = values.Order().ToArray();
        var n = sorted.Length;
        var edges = new List<double>();
        for (var d = 1; d <= 9; d++)
        {
            var index = (int)Math.Ceiling(d * n / 10.0) - 1;
            var edge = sorted[Math.Clamp(index, 0, n - 1)];
            if (roundDigits is { } digits)
            {
                edge = Math.Round(edge, digits, MidpointRounding.AwayFromZero);
            }

            if (edges.Count == 0 || edge > edges[^1])
            {
                edges.Add(edge);
            }
        }

        var counts = new long[edges.Count + 1];
        foreach (var v in sorted)
        {
            var bin = 0;
            while (bin < edges.Count && v > edges[bin])
            {
                bin++;
            }

            counts[bin]++;
        }

        return new BinnedBaseline([.. edges], [.. counts.Select(c => (double)c / n)]);
    }

    public static ImmutableDictionary<string, double> LevelProportions(IReadOnlyList<string> values, IEnumerable<string> levels)
    {
        var n = values.Count;
        return levels.ToImmutableDictionary(
            level => level,
            level => (double)values.Count(v => string.Equals(v, level, StringComparison.Ordinal)) / n,
            StringComparer.Ordinal);
    }
}
