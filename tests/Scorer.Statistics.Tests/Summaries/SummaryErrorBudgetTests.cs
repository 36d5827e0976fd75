using Scorer.Engine.Links;
using Scorer.ModelFile;
using Scorer.Statistics.Summaries;
using Xunit.Abstractions;

namespace Scorer.Statistics.Tests.Summaries;

/// <summary>
/// The error budget of the summarised report (issue "production volume", docs/monitoring.md "Summaries"): on seeded
/// streams of 10 million labelled predictions, the report of the merged summaries against the exact report of the same
/// arrays (<see cref="CalibrationStatistics.Compute"/>, itself checked against R, pROC, scikit-learn and statsmodels in
/// <see cref="CalibrationReferenceTests"/>). Sums and reliability within 1e-12 relative; AUC within 1e-4 absolute;
/// calibration intercept and slope within 1% of their standard errors; the DeLong standard error within 1%; the
/// Hosmer–Lemeshow statistic within 1% (its groups are whole bins; see SummaryStatistics).
/// </summary>
public sealed class SummaryErrorBudgetTests(ITestOutputHelper output)
{
    private const int Rows = 10_000_000;

    /// <summary>The streams: link, how the outcomes are drawn against the model's p, whether p has ties.</summary>
    public static TheoryData<string, string, bool> Streams => new()
    {
        { "logit", "calibrated", false },
        { "logit", "odds-doubled", false },
        { "probit", "calibrated", false },
        { "probit", "slope-0.7", false },
        { "cloglog", "calibrated", true },
        { "cloglog", "oe-1.3", false },
    };

    [Theory]
    [MemberData(nameof(Streams))]
    public void Summarised_report_of_ten_million_rows_stays_within_the_error_budget(string link, string truth, bool ties)
    {
        var (p, y) = Stream(link, truth, ties, seed: 20261203);
        // Summaries of 100 buckets merged, as a window merges its buckets.
        var merged = new LabelledSummary();
        const int buckets = 100;
        for (var k = 0; k < buckets; k++)
        {
            var bucket = new LabelledSummary();
            for (var i = k * (Rows / buckets); i < (k + 1) * (Rows / buckets); i++)
            {
                bucket.Add(p[i], y[i]);
            }

            merged.AddStored(bucket.Write());
        }

        var clock = System.Diagnostics.Stopwatch.StartNew();
        var exact = CalibrationStatistics.Compute(p, y);
        output.WriteLine($"exact report {clock.ElapsedMilliseconds} ms");
        clock.Restart();
        var summarised = SummaryStatistics.Compute(merged);
        output.WriteLine($"summarised report {clock.ElapsedMilliseconds} ms");

        // The sums against the same sums formed offline in extended care (compensated, in row order): a plain sum of
        // ten million terms, as the exact report forms it, is itself only good to about 1e-11.
        Assert.Equal(exact.Labelled, summarised.Labelled);
        Assert.Equal(exact.Events, summarised.Events);
        var sums = OfflineSums(p, y);
        Relative(sums.P, summarised.Expected, 1e-12, "expected");
        Relative(sums.SquaredError / Rows, summarised.Brier, 1e-12, "brier");
        Relative(sums.LogLoss / Rows, summarised.LogLoss, 1e-12, "logLoss");
        Relative(sums.Spiegelhalter, summarised.Spiegelhalter!.Z, 1e-12, "spiegelhalter.z");
        Relative(exact.Events / sums.P, summarised.ObservedExpected!.Value.Estimate, 1e-12, "oe");
        var ece = exact.Reliability.Sum(r => (double)r.Count / Rows * Math.Abs(r.ObservedRate - sums.Reliability[r.Bin] / r.Count));
        Relative(ece, summarised.Ece, 1e-10, "ece");
        Relative(exact.Murphy.Reliability, summarised.Murphy.Reliability, 1e-8, "murphy.reliability");
        Relative(exact.Murphy.Resolution, summarised.Murphy.Resolution, 1e-9, "murphy.resolution");
        Assert.Equal(exact.Reliability.Count, summarised.Reliability.Count);
        for (var b = 0; b < exact.Reliability.Count; b++)
        {
            Assert.Equal(exact.Reliability[b].Count, summarised.Reliability[b].Count);
            Assert.Equal(exact.Reliability[b].Events, summarised.Reliability[b].Events);
            Relative(sums.Reliability[exact.Reliability[b].Bin] / exact.Reliability[b].Count, summarised.Reliability[b].MeanPredicted, 1e-12,
                $"reliability[{b}].meanPredicted");
        }

        var auc = Math.Abs(exact.Auc!.Estimate - summarised.Auc!.Estimate);
        output.WriteLine($"auc: exact {exact.Auc.Estimate:R}, summarised {summarised.Auc.Estimate:R}, |difference| {auc:E2}");
        Assert.True(auc <= 1e-4, $"AUC differs by {auc}");
        var aucSe = Math.Abs(summarised.Auc.Se / exact.Auc.Se - 1);
        output.WriteLine($"auc se: exact {exact.Auc.Se:R}, summarised {summarised.Auc.Se:R}, relative {aucSe:E2}");
        Assert.True(aucSe <= 0.01, $"DeLong se differs by {aucSe:P3}");
        InSe(exact.CalibrationIntercept!.Value, summarised.CalibrationIntercept!.Value, "calibration intercept");
        InSe(exact.CalibrationSlope!.Value, summarised.CalibrationSlope!.Value, "calibration slope");
        // Hosmer–Lemeshow: the summary's groups are whole bins. Over those same groups, cut from the rows themselves at
        // each group's greatest p, the statistic is the exact one; against R's quantile groups it differs by the rows
        // the boundaries moved, which matters only when the statistic is small (a calibrated stream: about its df).
        var hl = summarised.HosmerLemeshow!;
        var sameGroups = HosmerLemeshowOverGroups(p, y, [.. hl.Groups.Select(g => g.MaxPredicted)]);
        Relative(sameGroups, hl.Statistic, 1e-9, "hosmer-lemeshow over the summary's groups");
        var quantileGroups = Math.Abs(hl.Statistic / exact.HosmerLemeshow!.Statistic - 1);
        output.WriteLine($"hosmer-lemeshow: exact {exact.HosmerLemeshow.Statistic:R} ({exact.HosmerLemeshow.Df} groups), summarised {hl.Statistic:R} ({hl.Df}), relative {quantileGroups:E2}");
        Assert.Equal(exact.HosmerLemeshow.Df, hl.Df);
        Assert.True(quantileGroups <= 0.01 || Math.Abs(hl.Statistic - exact.HosmerLemeshow.Statistic) <= 0.05 * hl.Df,
            $"Hosmer-Lemeshow differs from R's grouping by {quantileGroups:P3}");
        output.WriteLine($"occupied bins {merged.OccupiedBins}");
    }

    private static (double P, double SquaredError, double LogLoss, double Spiegelhalter, double[] Reliability) OfflineSums(double[] p, byte[] y)
    {
        decimal sumP = 0, squared = 0, logLoss = 0, numerator = 0, variance = 0;
        var reliability = new decimal[10];
        for (var i = 0; i < p.Length; i++)
        {
            var pi = (decimal)p[i];
            var residual = y[i] - pi;
            sumP += pi;
            squared += residual * residual;
            var clipped = Math.Clamp(p[i], CalibrationStatistics.LogLossClip, 1.0 - CalibrationStatistics.LogLossClip);
            logLoss -= (decimal)(y[i] == 1 ? Math.Log(clipped) : Scorer.Engine.Numerics.Elementary.Log1P(-clipped));
            var oneMinusTwoP = 1 - 2 * pi;
            numerator += residual * oneMinusTwoP;
            variance += oneMinusTwoP * oneMinusTwoP * pi * (1 - pi);
            reliability[ReliabilityTable.BinOf(p[i])] += pi;
        }

        return ((double)sumP, (double)squared, (double)logLoss, (double)numerator / Math.Sqrt((double)variance), [.. reliability.Select(v => (double)v)]);
    }

    /// <summary>H over groups (b_{g−1}, b_g] of p cut at the given upper ends, from the rows.</summary>
    private static double HosmerLemeshowOverGroups(double[] p, byte[] y, double[] upper)
    {
        var n = new long[upper.Length];
        var o = new long[upper.Length];
        var e = new decimal[upper.Length];
        for (var i = 0; i < p.Length; i++)
        {
            var g = Array.BinarySearch(upper, p[i]);
            g = g >= 0 ? g : ~g;
            n[g]++;
            o[g] += y[i];
            e[g] += (decimal)p[i];
        }

        var h = 0.0;
        for (var g = 0; g < upper.Length; g++)
        {
            var expected = (double)e[g];
            h += (o[g] - expected) * (o[g] - expected) / (expected * (n[g] - expected) / n[g]);
        }

        return h;
    }

    private void InSe(FittedValue exact, FittedValue summarised, string what)
    {
        var inSe = Math.Abs(summarised.Estimate - exact.Estimate) / exact.Se;
        var se = Math.Abs(summarised.Se / exact.Se - 1);
        output.WriteLine($"{what}: exact {exact.Estimate:R} (se {exact.Se:R}), summarised {summarised.Estimate:R} (se {summarised.Se:R}); difference {inSe:E2} se, se relative {se:E2}");
        Assert.True(inSe <= 0.01, $"{what} differs by {inSe:P3} of its se");
        Assert.True(se <= 0.01, $"{what} se differs by {se:P3}");
    }

    private void Relative(double expected, double actual, double tolerance, string what)
    {
        var error = Math.Abs(actual - expected) / Math.Max(Math.Abs(expected), double.Epsilon);
        Assert.True(error <= tolerance, $"{what}: expected {expected:R}, got {actual:R} (relative {error:E2})");
    }

    /// <summary>
    /// A seeded stream: x ~ N(0, 1) (with ties, x takes one of 40 values), the model's η = −1.5 + 1.1x, its p by the
    /// link, and y drawn from the true probability: p itself (calibrated), the odds doubled, logit slope 0.7 about
    /// the model's logit, or p × 1.3 (capped below 1).
    /// </summary>
    internal static (double[] P, byte[] Y) Stream(string link, string truth, bool ties, int seed)
    {
        var kind = link switch { "logit" => LinkKind.Logit, "probit" => LinkKind.Probit, _ => LinkKind.CLogLog };
        var random = new Random(seed);
        var p = new double[Rows];
        var y = new byte[Rows];
        for (var i = 0; i < Rows; i++)
        {
            var x = Math.Sqrt(-2.0 * Math.Log(1.0 - random.NextDouble())) * Math.Cos(2.0 * Math.PI * random.NextDouble());
            if (ties)
            {
                x = Math.Round(Math.Clamp(x, -2.0, 2.0) * 10.0) / 10.0;
            }

            var eta = -1.5 + 1.1 * x;
            var pm = Link.Inverse(kind, eta);
            var logit = Math.Log(pm) - Math.Log(1.0 - pm);
            var pt = truth switch
            {
                "calibrated" => pm,
                "odds-doubled" => Link.Logistic(logit + Math.Log(2.0)),
                "slope-0.7" => Link.Logistic(0.7 * logit),
                _ => Math.Min(0.999, 1.3 * pm),
            };
            p[i] = pm;
            y[i] = random.NextDouble() < pt ? (byte)1 : (byte)0;
        }

        return (p, y);
    }
}
