using Scorer.Engine.Numerics;

namespace Scorer.Statistics;

/// <summary>
/// Calibration and discrimination of a batch of labelled predictions: counts and O/E, the calibration intercept and
/// slope, Spiegelhalter's z, Hosmer–Lemeshow, the Brier score with Murphy's decomposition, log loss, the reliability
/// table and its ECE, and the AUC with its DeLong interval. One pass over the rows, one sort (shared by the
/// Hosmer–Lemeshow grouping and the AUC) and two small Newton fits.
/// </summary>
public static class CalibrationStatistics
{
    /// <summary>p is clipped to [LogLossClip, 1 − LogLossClip] for the log loss (common practice; sklearn 1.2 clips at 2.2e-16).</summary>
    public const double LogLossClip = 1e-15;

    /// <summary>
    /// Computes the <see cref="CalibrationReport"/> of predicted probabilities <paramref name="probability"/> against
    /// outcomes <paramref name="outcome"/> (1 = event). With no rows, Labelled = 0, every optional statistic is null,
    /// Brier, LogLoss, Ece and the Murphy terms are NaN, and the reliability table is empty.
    /// </summary>
    /// <param name="probability">The predicted probabilities, each in [0, 1].</param>
    /// <param name="outcome">The outcomes, each 0 or 1, in the same order.</param>
    /// <param name="level">The confidence level of every interval (default 0.95).</param>
    /// <param name="groups">The number of Hosmer–Lemeshow quantile groups (default 10).</param>
    /// <param name="bins">The number of equal-width reliability and Murphy bins (default 10).</param>
    /// <exception cref="ArgumentException">Lengths differ, a p is NaN or outside [0, 1], or an outcome is not 0 or 1.</exception>
    /// <exception cref="ArgumentOutOfRangeException">level is not in (0, 1), groups &lt; 2 or bins &lt; 1.</exception>
    public static CalibrationReport Compute(
        ReadOnlySpan<double> probability, ReadOnlySpan<byte> outcome, double level = 0.95, int groups = 10, int bins = 10)
    {
        Guard.SameLength(probability.Length, outcome.Length, nameof(outcome), nameof(probability));
        Guard.Probabilities(probability, nameof(probability));
        Guard.Outcomes(outcome, nameof(outcome));
        var sortedP = probability.ToArray();
        var sortedY = outcome.ToArray();
        Array.Sort(sortedP, sortedY);
        return FromSorted(sortedP, sortedY, level, groups, bins);
    }

    /// <summary>
    /// As <see cref="Compute"/>, for rows already in ascending order of p (ties in any order), as the monitor's row
    /// cache keeps them: nothing is copied or sorted. Every statistic is the same as Compute's on the same rows in any
    /// order (sums may differ in the last bits from the order of addition).
    /// </summary>
    /// <exception cref="ArgumentException">As Compute's, and when the probabilities are not in ascending order.</exception>
    public static CalibrationReport ComputeSorted(
        ReadOnlySpan<double> sortedProbability, ReadOnlySpan<byte> outcome, double level = 0.95, int groups = 10, int bins = 10)
    {
        Guard.SameLength(sortedProbability.Length, outcome.Length, nameof(outcome), nameof(sortedProbability));
        Guard.Probabilities(sortedProbability, nameof(sortedProbability));
        Guard.Outcomes(outcome, nameof(outcome));
        for (var i = 1; i < sortedProbability.Length; i++)
        {
            if (sortedProbability[i] < sortedProbability[i - 1])
            {
                throw new ArgumentException($"sortedProbability[{i}] is below sortedProbability[{i - 1}]; the rows must be in ascending order of p.",
                    nameof(sortedProbability));
            }
        }

        return FromSorted(sortedProbability, outcome, level, groups, bins);
    }

    /// <summary>The report of checked rows in ascending order of p.</summary>
    private static CalibrationReport FromSorted(ReadOnlySpan<double> probability, ReadOnlySpan<byte> outcome, double level, int groups, int bins)
    {
        var z = Quantiles.TwoSidedZ(level);
        ArgumentOutOfRangeException.ThrowIfLessThan(groups, 2);
        ArgumentOutOfRangeException.ThrowIfLessThan(bins, 1);

        var n = probability.Length;
        if (n == 0)
        {
            return new CalibrationReport(
                0, 0, 0.0, null, null, null, null, null, null, double.NaN,
                new MurphyDecomposition(double.NaN, double.NaN, double.NaN, double.NaN), double.NaN, double.NaN, [], null);
        }

        // One pass: sums, Spiegelhalter's terms, reliability bins (sklearn rule) and Murphy bins (floor rule).
        var events = 0;
        double expected = 0.0, squaredError = 0.0, logLoss = 0.0, spiegelNumerator = 0.0, spiegelVariance = 0.0;
        var reliabilityCount = new int[bins];
        var reliabilityEvents = new int[bins];
        var reliabilitySum = new double[bins];
        var murphyCount = new int[bins];
        var murphyEvents = new int[bins];
        var murphySum = new double[bins];
        for (var i = 0; i < n; i++)
        {
            var p = probability[i];
            int y = outcome[i];
            events += y;
            expected += p;
            var residual = y - p;
            squaredError += residual * residual;
            var clipped = Math.Clamp(p, LogLossClip, 1.0 - LogLossClip);
            logLoss -= y == 1 ? Math.Log(clipped) : Elementary.Log1P(-clipped);
            var oneMinusTwoP = 1.0 - 2.0 * p;
            spiegelNumerator += residual * oneMinusTwoP;
            spiegelVariance += oneMinusTwoP * oneMinusTwoP * p * (1.0 - p);

            var r = ReliabilityTable.BinIndex(p, bins);
            reliabilityCount[r]++;
            reliabilityEvents[r] += y;
            reliabilitySum[r] += p;

            var m = Math.Min((int)Math.Floor(bins * p), bins - 1);
            murphyCount[m]++;
            murphyEvents[m] += y;
            murphySum[m] += p;
        }

        var brier = squaredError / n;
        var reliability = ReliabilityTable.Rows(reliabilityCount, reliabilityEvents, reliabilitySum, z);
        var ece = Ece(reliability, n);
        var observedExpected = ObservedExpected(events, expected, z);
        var spiegelhalter = Spiegelhalter(spiegelNumerator, spiegelVariance);

        // The two calibration fits are independent passes over the logits: they run on two other threads while this one
        // forms Hosmer–Lemeshow and the AUC from the sorted rows.
        Task<(bool HasIntercept, double A, double ASe, bool HasSlope, double C, double B, double BSe)>? fits = null;
        if (events > 0 && events < n)
        {
            var logit = new double[n];
            var y = new double[n];
            for (var i = 0; i < n; i++)
            {
                logit[i] = LogisticFit.Logit(probability[i]);
                y[i] = outcome[i];
            }

            fits = Task.Run(() =>
            {
                bool hasIntercept = false, hasSlope = false;
                double a = 0, aSe = 0, c = 0, b = 0, bSe = 0;
                Parallel.Invoke(
                    () => hasIntercept = LogisticFit.TryFitIntercept(logit, y, out a, out aSe),
                    () => hasSlope = LogisticFit.TryFitLine(logit, y, out c, out b, out _, out bSe));
                return (hasIntercept, a, aSe, hasSlope, c, b, bSe);
            });
        }

        var hosmerLemeshow = HosmerLemeshow.FromSorted(probability, outcome, groups);
        var auc = events > 0 && events < n ? Discrimination.FromSorted(probability, outcome, z) : null;

        FittedValue? intercept = null, slope = null;
        double? slopeIntercept = null;
        if (fits is not null)
        {
            var f = fits.GetAwaiter().GetResult();
            if (f.HasIntercept)
            {
                intercept = new FittedValue(f.A, f.ASe, f.A - z * f.ASe, f.A + z * f.ASe);
            }

            if (f.HasSlope)
            {
                slope = new FittedValue(f.B, f.BSe, f.B - z * f.BSe, f.B + z * f.BSe);
                slopeIntercept = f.C;
            }
        }

        return new CalibrationReport(
            n, events, expected, observedExpected, intercept, slope, slopeIntercept, spiegelhalter, hosmerLemeshow,
            brier, Murphy([.. murphyCount.Select(c => (long)c)], [.. murphyEvents.Select(c => (long)c)], murphySum, n, events, brier), logLoss / n, ece, reliability, auc);
    }

    /// <summary>The expected calibration error Σ_b (n_b/n) |ō_b − p̄_b| over the reliability bins.</summary>
    internal static double Ece(IReadOnlyList<ReliabilityBin> reliability, int n)
    {
        var ece = 0.0;
        foreach (var row in reliability)
        {
            ece += (double)row.Count / n * Math.Abs(row.ObservedRate - row.MeanPredicted);
        }

        return ece;
    }

    /// <summary>O/E with the interval exp(ln(O/E) ∓ z/√O); null when O or E is 0.</summary>
    internal static Interval? ObservedExpected(long events, double expected, double z)
    {
        if (events == 0 || !(expected > 0))
        {
            return null;
        }

        var ratio = events / expected;
        var halfWidth = z / Math.Sqrt(events);
        var logRatio = Math.Log(ratio);
        return new Interval(ratio, Math.Exp(logRatio - halfWidth), Math.Exp(logRatio + halfWidth));
    }

    /// <summary>Spiegelhalter's z and its two-sided p from the numerator and variance sums; null when the variance is 0.</summary>
    internal static SpiegelhalterTest? Spiegelhalter(double numerator, double variance)
    {
        if (!(variance > 0))
        {
            return null;
        }

        var zStatistic = numerator / Math.Sqrt(variance);
        return new SpiegelhalterTest(zStatistic, Tails.TwoSidedNormal(zStatistic));
    }

    /// <summary>Murphy (1973): reliability, resolution and uncertainty over the bins, and the within-bin remainder.</summary>
    internal static MurphyDecomposition Murphy(IReadOnlyList<long> count, IReadOnlyList<long> events, IReadOnlyList<double> sum, int n, int totalEvents, double brier)
    {
        var overall = (double)totalEvents / n;
        double reliability = 0.0, resolution = 0.0;
        for (var b = 0; b < count.Count; b++)
        {
            if (count[b] == 0)
            {
                continue;
            }

            var meanP = sum[b] / count[b];
            var rate = (double)events[b] / count[b];
            reliability += count[b] * (meanP - rate) * (meanP - rate);
            resolution += count[b] * (rate - overall) * (rate - overall);
        }

        reliability /= n;
        resolution /= n;
        var uncertainty = overall * (1.0 - overall);
        return new MurphyDecomposition(reliability, resolution, uncertainty, brier - (reliability - resolution + uncertainty));
    }
}
