using Scorer.Engine.Numerics;

namespace Scorer.Statistics;

/// <summary>
/// The reliability (calibration) table of sklearn's <c>calibration_curve(strategy = "uniform")</c> with a Wilson score
/// interval per bin. The edges are e_i = i·(1/k) in double, as <c>numpy.linspace(0, 1, k + 1)</c> gives them (for k =
/// 10, e₃ = 0.30000000000000004), and the bin of p is the number of interior edges e₁..e_{k−1} strictly below p
/// (<c>searchsorted(..., side = "left")</c>), so the bins are [0, e₁], (e₁, e₂], ..., (e_{k−1}, 1].
/// </summary>
public static class ReliabilityTable
{
    /// <summary>The non-empty bins of the table, in ascending order, with Wilson intervals at <paramref name="level"/>.</summary>
    /// <exception cref="ArgumentException">Lengths differ, a p is NaN or outside [0, 1], or an outcome is not 0 or 1.</exception>
    /// <exception cref="ArgumentOutOfRangeException"><paramref name="bins"/> is less than 1, or <paramref name="level"/> is not in (0, 1).</exception>
    public static IReadOnlyList<ReliabilityBin> Compute(ReadOnlySpan<double> probability, ReadOnlySpan<byte> outcome, int bins = 10, double level = 0.95)
    {
        Guard.SameLength(probability.Length, outcome.Length, nameof(outcome), nameof(probability));
        Guard.Probabilities(probability, nameof(probability));
        Guard.Outcomes(outcome, nameof(outcome));
        ArgumentOutOfRangeException.ThrowIfLessThan(bins, 1);
        var z = Quantiles.TwoSidedZ(level);
        var count = new int[bins];
        var events = new int[bins];
        var sum = new double[bins];
        for (var i = 0; i < probability.Length; i++)
        {
            var b = BinIndex(probability[i], bins);
            count[b]++;
            events[b] += outcome[i];
            sum[b] += probability[i];
        }

        return Rows(count, events, sum, z);
    }

    /// <summary>The 0-based bin of p among <paramref name="bins"/> bins: the number of interior edges i·(1/k), i = 1..k−1, strictly below p.</summary>
    /// <exception cref="ArgumentException"><paramref name="p"/> is NaN or outside [0, 1].</exception>
    /// <exception cref="ArgumentOutOfRangeException"><paramref name="bins"/> is less than 1.</exception>
    public static int BinOf(double p, int bins = 10)
    {
        Guard.Probabilities([p], nameof(p));
        ArgumentOutOfRangeException.ThrowIfLessThan(bins, 1);
        return BinIndex(p, bins);
    }

    /// <summary>
    /// The Wilson score interval of p̂ = events/count at confidence <paramref name="level"/>:
    /// (p̂ + z²/2n ∓ z√(p̂(1 − p̂)/n + z²/4n²)) / (1 + z²/n), z = Φ⁻¹((1 + level)/2), clipped to [0, 1] against rounding;
    /// the lower end is exactly 0 when events = 0 and the upper exactly 1 when events = count. Estimate is p̂. All
    /// three are NaN when count is 0.
    /// </summary>
    /// <exception cref="ArgumentOutOfRangeException">events is negative or exceeds count, or level is not in (0, 1).</exception>
    public static Interval WilsonInterval(int events, int count, double level = 0.95) => Wilson(events, count, Quantiles.TwoSidedZ(level));

    internal static int BinIndex(double p, int bins)
    {
        var step = 1.0 / bins;
        var b = Math.Clamp((int)(p * bins), 0, bins - 1);
        while (b > 0 && b * step >= p)
        {
            b--;
        }

        while (b < bins - 1 && (b + 1) * step < p)
        {
            b++;
        }

        return b;
    }

    /// <summary>The Wilson interval of <see cref="WilsonInterval"/> for a given critical value z.</summary>
    internal static Interval Wilson(int events, int count, double z)
    {
        ArgumentOutOfRangeException.ThrowIfNegative(count);
        ArgumentOutOfRangeException.ThrowIfNegative(events);
        ArgumentOutOfRangeException.ThrowIfGreaterThan(events, count);
        if (count == 0)
        {
            return new Interval(double.NaN, double.NaN, double.NaN);
        }

        double n = count;
        var rate = events / n;
        var z2 = z * z;
        var denominator = 1.0 + z2 / n;
        var center = (rate + z2 / (2.0 * n)) / denominator;
        var half = z * Math.Sqrt(rate * (1.0 - rate) / n + z2 / (4.0 * n * n)) / denominator;
        var lower = events == 0 ? 0.0 : Math.Max(0.0, center - half);
        var upper = events == count ? 1.0 : Math.Min(1.0, center + half);
        return new Interval(rate, lower, upper);
    }

    internal static List<ReliabilityBin> Rows(int[] count, int[] events, double[] sum, double z)
    {
        var bins = count.Length;
        var step = 1.0 / bins;
        var rows = new List<ReliabilityBin>();
        for (var b = 0; b < bins; b++)
        {
            if (count[b] == 0)
            {
                continue;
            }

            var wilson = Wilson(events[b], count[b], z);
            var upper = b == bins - 1 ? 1.0 : (b + 1) * step;
            rows.Add(new ReliabilityBin(
                b, b * step, upper, count[b], events[b], sum[b] / count[b], (double)events[b] / count[b], wilson.Lower, wilson.Upper));
        }

        return rows;
    }
}
