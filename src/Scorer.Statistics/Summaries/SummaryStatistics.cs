using Scorer.Engine.Numerics;

namespace Scorer.Statistics.Summaries;

/// <summary>
/// The <see cref="CalibrationReport"/> of a <see cref="LabelledSummary"/>: exact where the summary holds sums (counts,
/// O/E, Spiegelhalter, Brier and Murphy, log loss, the reliability table and its ECE); from the η bins for the AUC and
/// its DeLong interval (rows of one bin count as tied), the calibration intercept and slope (grouped-binomial fits on
/// the bins, each bin's rows expanded to second order about the bin's mean η, so the grouping error is of the order of
/// the fourth power of the bin width) and the Hosmer–Lemeshow groups (whole bins: a quantile's group boundary moves to
/// the nearer edge of the bin it falls in). docs/monitoring.md gives the measured error of each against the exact
/// report.
/// </summary>
public static class SummaryStatistics
{
    private const int MaxIterations = 100;
    private const int MaxHalvings = 60;
    private const double StepTolerance = 1e-12;

    /// <summary>The report of the summarised rows, with intervals at <paramref name="level"/> and <paramref name="groups"/> Hosmer–Lemeshow groups.</summary>
    /// <exception cref="ArgumentOutOfRangeException">level is not in (0, 1), groups &lt; 2, or the summary holds more rows than a report counts (2³¹ − 1).</exception>
    public static CalibrationReport Compute(LabelledSummary summary, double level = 0.95, int groups = 10)
    {
        ArgumentNullException.ThrowIfNull(summary);
        var z = Quantiles.TwoSidedZ(level);
        ArgumentOutOfRangeException.ThrowIfLessThan(groups, 2);
        ArgumentOutOfRangeException.ThrowIfGreaterThan(summary.Count, int.MaxValue, nameof(summary));
        var n = (int)summary.Count;
        if (n == 0)
        {
            return new CalibrationReport(
                0, 0, 0.0, null, null, null, null, null, null, double.NaN,
                new MurphyDecomposition(double.NaN, double.NaN, double.NaN, double.NaN), double.NaN, double.NaN, [], null);
        }

        var events = (int)summary.Events;
        var expected = summary.SumP;
        var brier = summary.SumSquaredError / n;
        var reliability = ReliabilityTable.Rows(ToInt(summary.ReliabilityCount), ToInt(summary.ReliabilityEvents), summary.ReliabilitySum, z);
        var ece = CalibrationStatistics.Ece(reliability, n);
        var observedExpected = CalibrationStatistics.ObservedExpected(events, expected, z);
        var spiegelhalter = CalibrationStatistics.Spiegelhalter(summary.SpiegelhalterNumerator, summary.SpiegelhalterVariance);

        var bins = summary.OccupiedEtaBins().Select(Grouped.Of).ToArray();
        FittedValue? intercept = null, slope = null;
        double? slopeIntercept = null;
        AucEstimate? auc = null;
        if (events > 0 && events < n)
        {
            if (TryFit(bins, fitSlope: false, out var a, out _, out var aSe, out _))
            {
                intercept = new FittedValue(a, aSe, a - z * aSe, a + z * aSe);
            }

            if (TryFit(bins, fitSlope: true, out var c, out var b, out _, out var bSe))
            {
                slope = new FittedValue(b, bSe, b - z * bSe, b + z * bSe);
                slopeIntercept = c;
            }

            auc = Auc(bins, events, n - events, z);
        }

        var murphy = CalibrationStatistics.Murphy(summary.MurphyCount, summary.MurphyEvents, summary.MurphySum, n, events, brier);
        return new CalibrationReport(
            n, events, expected, observedExpected, intercept, slope, slopeIntercept, spiegelhalter, HosmerLemeshowOf(bins, n, groups),
            brier, murphy, summary.SumLogLoss / n, ece, reliability, auc);
    }

    private static int[] ToInt(long[] values) => [.. values.Select(v => checked((int)v))];

    /// <summary>
    /// A bin as the fits use it: rows n, events, mean η m, the sum of squares about the mean S = Σ(η − m)², and Σ_{y=1} η.
    /// </summary>
    private readonly record struct Grouped(EtaBin Bin, double N, double Cases, double Mean, double Spread, double SumEtaCases)
    {
        public static Grouped Of(EtaBin bin)
        {
            double n = bin.Count;
            var centre = LabelledSummary.Centre(bin.Bin);
            var meanD = bin.SumD / n;
            var spread = Math.Max(0.0, bin.SumD2 - n * meanD * meanD);
            return new Grouped(bin, n, bin.Cases, centre + meanD, spread, centre * bin.Cases + bin.SumDCases);
        }
    }

    /// <summary>
    /// The log-likelihood of logit P(y = 1) = c + b·η over the bins, its gradient and its information, each bin's sums
    /// over its rows taken to second order about the bin mean m: Σ f(η_i) ≈ n f(m) + ½ f''(m) S.
    /// </summary>
    private static (double LogLikelihood, double G0, double G1, double H00, double H01, double H11) Evaluate(Grouped[] bins, double c, double b)
    {
        double ll = 0, g0 = 0, g1 = 0, h00 = 0, h01 = 0, h11 = 0;
        foreach (var g in bins)
        {
            var m = g.Mean;
            var s = g.Spread;
            var t = c + b * m;
            var pi = Expit(t);
            var w = pi * (1.0 - pi);
            var w1 = w * (1.0 - 2.0 * pi);
            var w2 = w * (1.0 - 6.0 * pi + 6.0 * pi * pi);
            var b2 = b * b;
            ll += c * g.Cases + b * g.SumEtaCases - (g.N * Log1PExp(t) + 0.5 * b2 * w * s);
            g0 += g.Cases - (g.N * pi + 0.5 * b2 * w1 * s);
            g1 += g.SumEtaCases - (g.N * m * pi + 0.5 * s * (2.0 * b * w + m * b2 * w1));
            h00 += g.N * w + 0.5 * b2 * w2 * s;
            h01 += g.N * m * w + 0.5 * s * (2.0 * b * w1 + m * b2 * w2);
            h11 += g.N * m * m * w + 0.5 * s * (2.0 * w + 4.0 * m * b * w1 + m * m * b2 * w2);
        }

        return (ll, g0, g1, h00, h01, h11);
    }

    /// <summary>
    /// Newton–Raphson with step halving on the grouped log-likelihood: the intercept alone (b fixed at 1, the offset
    /// fit) or the line (c, b). False when the fit does not converge or its information is singular.
    /// </summary>
    private static bool TryFit(Grouped[] bins, bool fitSlope, out double c, out double b, out double cSe, out double bSe)
    {
        c = 0.0;
        b = 1.0;
        cSe = bSe = double.NaN;
        var at = Evaluate(bins, c, b);
        for (var iteration = 0; iteration < MaxIterations; iteration++)
        {
            double step0, step1 = 0.0;
            if (fitSlope)
            {
                var det = at.H00 * at.H11 - at.H01 * at.H01;
                if (!(det > 0) || !(at.H00 > 0))
                {
                    return false;
                }

                step0 = (at.H11 * at.G0 - at.H01 * at.G1) / det;
                step1 = (at.H00 * at.G1 - at.H01 * at.G0) / det;
            }
            else
            {
                if (!(at.H00 > 0))
                {
                    return false;
                }

                step0 = at.G0 / at.H00;
            }

            if (!double.IsFinite(step0) || !double.IsFinite(step1))
            {
                return false;
            }

            if (Math.Abs(step0) <= StepTolerance * Math.Max(1.0, Math.Abs(c)) && Math.Abs(step1) <= StepTolerance * Math.Max(1.0, Math.Abs(b)))
            {
                c += step0;
                b += step1;
                at = Evaluate(bins, c, b);
                if (fitSlope)
                {
                    var det = at.H00 * at.H11 - at.H01 * at.H01;
                    cSe = Math.Sqrt(at.H11 / det);
                    bSe = Math.Sqrt(at.H00 / det);
                    return double.IsFinite(bSe) && double.IsFinite(cSe);
                }

                cSe = 1.0 / Math.Sqrt(at.H00);
                return double.IsFinite(cSe);
            }

            var accepted = false;
            for (var halving = 0; halving <= MaxHalvings && !accepted; halving++)
            {
                var next = Evaluate(bins, c + step0, b + step1);
                if (next.LogLikelihood >= at.LogLikelihood - 1e-12 * (1.0 + Math.Abs(at.LogLikelihood)))
                {
                    c += step0;
                    b += step1;
                    at = next;
                    accepted = true;
                }
                else
                {
                    step0 *= 0.5;
                    step1 *= 0.5;
                }
            }

            if (!accepted)
            {
                return false;
            }
        }

        return false;
    }

    /// <summary>
    /// The AUC and its DeLong interval with the rows of a bin counted as tied: a case in bin k has placement (controls
    /// below k + ½ controls in k)/controls, a control (cases above k + ½ cases in k)/cases, as the exact placements give
    /// for tied scores.
    /// </summary>
    private static AucEstimate Auc(Grouped[] bins, long cases, long controls, double z)
    {
        double twiceU = 0.0;
        long controlsBelow = 0, casesBelow = 0;
        var v10 = new double[bins.Length];
        var v01 = new double[bins.Length];
        for (var k = 0; k < bins.Length; k++)
        {
            var bin = bins[k].Bin;
            v10[k] = (2.0 * controlsBelow + bin.Controls) / (2.0 * controls);
            v01[k] = (2.0 * (cases - casesBelow - bin.Cases) + bin.Cases) / (2.0 * cases);
            twiceU += bin.Cases * (2.0 * controlsBelow + bin.Controls);
            controlsBelow += bin.Controls;
            casesBelow += bin.Cases;
        }

        var auc = twiceU / (2.0 * cases * controls);
        double sum10 = 0.0, sum01 = 0.0;
        for (var k = 0; k < bins.Length; k++)
        {
            var bin = bins[k].Bin;
            var d10 = v10[k] - auc;
            var d01 = v01[k] - auc;
            sum10 += bin.Cases * d10 * d10;
            sum01 += bin.Controls * d01 * d01;
        }

        var variance = sum10 / (cases - 1) / cases + sum01 / (controls - 1) / controls;
        var se = Math.Sqrt(variance);
        return new AucEstimate(auc, se, Math.Max(0.0, auc - z * se), Math.Min(1.0, auc + z * se));
    }

    /// <summary>
    /// Hosmer–Lemeshow over groups of whole bins. The exact report cuts at the type-7 quantiles of p at k/g (R's
    /// <c>quantile</c>), each group (b_k, b_{k+1}]. Here the quantile's rank h = (n − 1)k/g + 1 falls in some bin; the
    /// group boundary is put after that bin when some of its rows rank at or below h and either the bin holds a single
    /// value of p (all its rows are at or below the quantile, as R counts ties) or at least half of its rows do, and
    /// before it otherwise.
    /// Equal boundaries merge, as R's unique() merges equal breaks; an empty group is left out.
    /// </summary>
    private static HosmerLemeshowTest? HosmerLemeshowOf(Grouped[] bins, long n, int groups)
    {
        if (bins.Length == 0)
        {
            return null;
        }

        var cumulative = new long[bins.Length];
        long running = 0;
        for (var k = 0; k < bins.Length; k++)
        {
            running += bins[k].Bin.Count;
            cumulative[k] = running;
        }

        // Boundaries as "the group ends after bin index e".
        var ends = new SortedSet<int>();
        var by = 1.0 / groups;
        var bin = 0;
        for (var k = 1; k < groups; k++)
        {
            var h = (n - 1) * Math.Min(k * by, 1.0) + 1.0;
            while (bin < bins.Length - 1 && cumulative[bin] < h)
            {
                bin++;
            }

            var before = bin == 0 ? 0 : cumulative[bin - 1];
            var b = bins[bin].Bin;
            var atOrBelow = Math.Floor(h) - before;
            // No row of the bin at or below the quantile: the boundary is before it. Otherwise after it when the bin holds
            // one value of p (the quantile is that value) or half of its rows or more rank at or below the quantile.
            var end = atOrBelow >= 1 && (b.MinP == b.MaxP || atOrBelow >= b.Count / 2.0) ? bin : bin - 1;
            if (end >= 0 && end < bins.Length - 1)
            {
                ends.Add(end);
            }
        }

        ends.Add(bins.Length - 1);
        var table = new List<RiskGroup>(ends.Count);
        var statistic = 0.0;
        var start = 0;
        foreach (var end in ends)
        {
            long count = 0, observed = 0;
            double expected = 0.0, min = double.PositiveInfinity, max = double.NegativeInfinity;
            for (var k = start; k <= end; k++)
            {
                var b = bins[k].Bin;
                count += b.Count;
                observed += b.Cases;
                expected += b.SumP;
                min = Math.Min(min, b.MinP);
                max = Math.Max(max, b.MaxP);
            }

            start = end + 1;
            if (count == 0)
            {
                continue;
            }

            table.Add(new RiskGroup(checked((int)count), checked((int)observed), expected, min, max));
            var diff = observed - expected;
            statistic += diff * diff / (expected * (count - expected) / count);
        }

        if (table.Count < 2)
        {
            return null;
        }

        return new HosmerLemeshowTest(statistic, table.Count, Tails.ChiSquaredUpper(statistic, table.Count), table);
    }

    private static double Expit(double t) => t >= 0 ? 1.0 / (1.0 + Math.Exp(-t)) : Math.Exp(t) / (1.0 + Math.Exp(t));

    private static double Log1PExp(double t) => t > 0 ? t + Elementary.Log1P(Math.Exp(-t)) : Elementary.Log1P(Math.Exp(t));
}
