using System.Globalization;

namespace Scorer.Statistics;

/// <summary>
/// The population stability index (PSI) of a current window against a baseline: PSI = Σ_b (a_b − e_b) ln(a_b/e_b) over
/// bins (−∞, e₁], (e₁, e₂], ..., (e_k, ∞), the proportions floored before the logarithm (common practice; the floor
/// 1e-4 is a convention, not a standard). Edges are usually the baseline's deciles (<see cref="Edges"/>).
/// </summary>
public static class PopulationStability
{
    /// <summary>The floor applied to both proportions by default.</summary>
    public const double DefaultFloor = 1e-4;

    /// <summary>
    /// The bin of <paramref name="value"/> for ascending interior <paramref name="edges"/>: the number of distinct edges
    /// strictly below the value, so the bins are (−∞, e₁], (e₁, e₂], ..., (e_k, ∞) and k distinct edges give k + 1
    /// bins. Tied edges are merged (a duplicate is skipped), so no bin is empty by construction; k counts distinct
    /// edges. O(k).
    /// </summary>
    /// <exception cref="ArgumentException">An edge is NaN, the edges are not ascending, or the value is NaN.</exception>
    public static int Bin(ReadOnlySpan<double> edges, double value)
    {
        CheckEdges(edges);
        if (double.IsNaN(value))
        {
            throw new ArgumentException("The value is NaN.", nameof(value));
        }

        var bin = 0;
        for (var i = 0; i < edges.Length && edges[i] < value; i++)
        {
            if (i == 0 || edges[i] != edges[i - 1])
            {
                bin++;
            }
        }

        return bin;
    }

    /// <summary>
    /// The count of <paramref name="values"/> in each of the (distinct edges + 1) bins of <see cref="Bin"/>, by binary
    /// search: O(k + N log k).
    /// </summary>
    /// <exception cref="ArgumentException">An edge or a value is NaN, or the edges are not ascending.</exception>
    public static long[] Counts(ReadOnlySpan<double> edges, ReadOnlySpan<double> values)
    {
        CheckEdges(edges);
        var distinct = new List<double>(edges.Length);
        foreach (var e in edges)
        {
            if (distinct.Count == 0 || e != distinct[^1])
            {
                distinct.Add(e);
            }
        }

        var counts = new long[distinct.Count + 1];
        for (var i = 0; i < values.Length; i++)
        {
            var v = values[i];
            if (double.IsNaN(v))
            {
                throw new ArgumentException(string.Create(CultureInfo.InvariantCulture, $"values[{i}] is NaN."), nameof(values));
            }

            // The number of distinct edges strictly below v (lower bound).
            int lo = 0, hi = distinct.Count;
            while (lo < hi)
            {
                var mid = (lo + hi) >>> 1;
                if (distinct[mid] < v)
                {
                    lo = mid + 1;
                }
                else
                {
                    hi = mid;
                }
            }

            counts[lo]++;
        }

        return counts;
    }

    /// <summary>
    /// Baseline edges for <paramref name="bins"/> bins: R's type-7 quantiles of the baseline at k·(1/bins), k = 1..bins−1
    /// (R: <c>quantile(x, seq(0, 1, 1/bins)[2:bins])</c>). Tied quantiles are kept; <see cref="Bin"/> merges them.
    /// </summary>
    /// <exception cref="ArgumentException">The baseline is empty or holds NaN.</exception>
    /// <exception cref="ArgumentOutOfRangeException"><paramref name="bins"/> is less than 2.</exception>
    public static double[] Edges(ReadOnlySpan<double> baseline, int bins = 10)
    {
        ArgumentOutOfRangeException.ThrowIfLessThan(bins, 2);
        if (baseline.IsEmpty)
        {
            throw new ArgumentException("The baseline is empty.", nameof(baseline));
        }

        Guard.Scores(baseline, nameof(baseline));
        var sorted = baseline.ToArray();
        Array.Sort(sorted);
        var by = 1.0 / bins;
        var edges = new double[bins - 1];
        for (var k = 1; k < bins; k++)
        {
            edges[k - 1] = SampleQuantile.Type7(sorted, k * by);
        }

        return edges;
    }

    /// <summary>
    /// PSI = Σ (a_b − e_b) ln(a_b/e_b) with each proportion replaced by max(proportion, <paramref name="floor"/>), so an
    /// empty bin contributes a finite term. 0 for no bins.
    /// </summary>
    /// <exception cref="ArgumentException">Lengths differ, or a proportion is NaN, infinite or negative.</exception>
    /// <exception cref="ArgumentOutOfRangeException"><paramref name="floor"/> is not positive and finite.</exception>
    public static double Index(ReadOnlySpan<double> expected, ReadOnlySpan<double> actual, double floor = DefaultFloor)
    {
        Guard.SameLength(expected.Length, actual.Length, nameof(actual), nameof(expected));
        CheckFloor(floor);
        CheckProportions(expected, nameof(expected));
        CheckProportions(actual, nameof(actual));
        var psi = 0.0;
        for (var b = 0; b < expected.Length; b++)
        {
            var e = Math.Max(expected[b], floor);
            var a = Math.Max(actual[b], floor);
            psi += (a - e) * Math.Log(a / e);
        }

        return psi;
    }

    /// <summary>
    /// PSI of current counts against expected proportions: the counts become proportions of their total, then
    /// <see cref="Index"/>. NaN when the counts total 0.
    /// </summary>
    /// <exception cref="ArgumentException">Lengths differ, a count is negative, or a proportion is NaN, infinite or negative.</exception>
    /// <exception cref="ArgumentOutOfRangeException"><paramref name="floor"/> is not positive and finite.</exception>
    public static double IndexFromCounts(ReadOnlySpan<double> expectedProportions, ReadOnlySpan<long> actualCounts, double floor = DefaultFloor)
    {
        Guard.SameLength(expectedProportions.Length, actualCounts.Length, nameof(actualCounts), nameof(expectedProportions));
        CheckFloor(floor);
        CheckProportions(expectedProportions, nameof(expectedProportions));
        long total = 0;
        for (var b = 0; b < actualCounts.Length; b++)
        {
            if (actualCounts[b] < 0)
            {
                throw new ArgumentException(
                    string.Create(CultureInfo.InvariantCulture, $"actualCounts[{b}] = {actualCounts[b]} is negative."), nameof(actualCounts));
            }

            total += actualCounts[b];
        }

        if (total == 0)
        {
            return double.NaN;
        }

        var actual = new double[actualCounts.Length];
        for (var b = 0; b < actual.Length; b++)
        {
            actual[b] = (double)actualCounts[b] / total;
        }

        return Index(expectedProportions, actual, floor);
    }

    private static void CheckEdges(ReadOnlySpan<double> edges)
    {
        for (var i = 0; i < edges.Length; i++)
        {
            if (double.IsNaN(edges[i]) || (i > 0 && edges[i] < edges[i - 1]))
            {
                throw new ArgumentException(
                    string.Create(CultureInfo.InvariantCulture, $"edges[{i}] = {edges[i]}: the edges must be ascending and not NaN."), nameof(edges));
            }
        }
    }

    private static void CheckProportions(ReadOnlySpan<double> proportions, string paramName)
    {
        for (var i = 0; i < proportions.Length; i++)
        {
            if (!(proportions[i] >= 0.0 && double.IsFinite(proportions[i])))
            {
                throw new ArgumentException(
                    string.Create(CultureInfo.InvariantCulture, $"{paramName}[{i}] = {proportions[i]} is not a proportion."), paramName);
            }
        }
    }

    private static void CheckFloor(double floor)
    {
        if (!(floor > 0.0 && double.IsFinite(floor)))
        {
            throw new ArgumentOutOfRangeException(nameof(floor), floor, "The floor must be positive and finite.");
        }
    }
}
