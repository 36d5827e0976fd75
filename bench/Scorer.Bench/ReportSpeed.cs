using System.Diagnostics;
using System.Globalization;
using System.Reflection;
using Microsoft.Data.Sqlite;
using Scorer.Monitor.Statistics;
using Scorer.Store;
using Scorer.Store.Sqlite;
using SQLitePCL;

namespace Scorer.Bench;

/// <summary>
/// `--report LABELLED`: the cost of a monitor report over LABELLED labelled predictions (the issue's case: 1,000,000
/// in under 200 ms, read and statistics). Invented data from a seeded generator: η ~ N(−1.7, 1), p = logistic(η),
/// y ~ Bernoulli(p).
/// </summary>
/// <remarks>
/// (a) The statistics: <see cref="CalibrationStatistics.Compute"/> taken apart (the sort, the AUC, Hosmer–Lemeshow, the
/// logits and the two calibration fits, the rest), median of 5 interleaved rounds after a warm-up; then a prototype of
/// mergeable per-bucket aggregates (hourly buckets), timed, with its error against the exact statistics.
/// (b) The store read: the predictions and their outcomes written through the store's own methods (positives reported
/// by id, the negatives recorded as implicit negatives, as a model with an outcome horizon gets them) into a file
/// under the temp folder, then <see cref="IScorerStore.GetLabelledAsync"/> over all of them (with the arrays, Compute
/// and the minute counts of MonitorReporter's window), median of 3; raw queries on the same file and on two copies (a
/// covering index; the time index extended by prediction_id) that say where the read's time goes; and the proposal end
/// to end: hourly aggregate tables read, merged and turned into the report.
/// </remarks>
internal static class ReportSpeed
{
    private const int StatisticsRounds = 5;
    private const int ReadRounds = 3;
    private const double Level = 0.95;

    private static readonly DateTimeOffset From = OutcomeIngestion.Start;
    private static readonly DateTimeOffset To = OutcomeIngestion.Start.AddDays(7).AddMinutes(1);

    public static async Task RunAsync(int labelled)
    {
        ArgumentOutOfRangeException.ThrowIfLessThan(labelled, 1000);
        var data = new OutcomeIngestion.InventedLog(labelled, 20261204);
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"{labelled:N0} invented labelled predictions, {data.Events:N0} events (mean p {data.P.Average():F4}); {Environment.ProcessorCount} cores, server GC {System.Runtime.GCSettings.IsServerGC}"));
        Statistics(data.P, data.Y);
        await StoreReadAsync(data);
    }

    // ---------------------------------------------------------------------------------------------------------------
    // (a) The statistics.
    // ---------------------------------------------------------------------------------------------------------------

    private static void Statistics(double[] p, byte[] y)
    {
        var n = p.Length;
        var z = 1.959963984540054;
        var sortedP = p.ToArray();
        var sortedY = y.ToArray();
        Array.Sort(sortedP, sortedY);
        var logit = new double[n];
        var parts = new (string Name, Func<double> Body)[]
        {
            ("CalibrationStatistics.Compute (whole)", () => CalibrationStatistics.Compute(p, y, Level).Brier),
            ("Discrimination.Auc alone (checks, copy, sort, placements)", () => Discrimination.Auc(p, y, Level).Estimate),
            ("HosmerLemeshow.Test alone (checks, copy, sort, groups)", () => HosmerLemeshow.Test(p, y)?.Statistic ?? 0),
            ("  copy p and y + Array.Sort(keys, items)", () =>
            {
                var keys = p.ToArray();
                var items = y.ToArray();
                Array.Sort(keys, items);
                return keys[0];
            }),
            ("  AUC + DeLong from the sorted rows (internal FromSorted)", () => MonitorInternals.AucFromSorted(sortedP, sortedY, z).Estimate),
            ("  Hosmer–Lemeshow from the sorted rows (internal FromSorted)", () => MonitorInternals.HosmerLemeshowFromSorted(sortedP, sortedY, 10)?.Statistic ?? 0),
            ("  logit(p) of every row (Compute's loop)", () => Logits(p, logit)),
            ("  calibration intercept fit (internal TryFitIntercept)", () => MonitorInternals.TryFitIntercept(logit, y, out var a, out _) ? a : double.NaN),
            ("  calibration slope fit (internal TryFitLine)", () => MonitorInternals.TryFitLine(logit, y, out _, out var b, out _, out _) ? b : double.NaN),
            ("  one likelihood pass (replica of the fits' Evaluate)", () => OnePass(logit, y, 0.0, 1.0)),
        };

        Logits(p, logit);
        var samples = parts.Select(_ => new List<double>()).ToArray();
        for (var round = 0; round <= StatisticsRounds; round++)
        {
            for (var k = 0; k < parts.Length; k++)
            {
                GC.Collect();
                GC.WaitForPendingFinalizers();
                var timer = Stopwatch.StartNew();
                _ = parts[k].Body();
                var ms = timer.Elapsed.TotalMilliseconds;
                if (round > 0)
                {
                    samples[k].Add(ms);
                }
            }
        }

        var medians = samples.Select(s => OutcomeIngestion.Median(s)).ToArray();
        Console.WriteLine();
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"(a) Statistics over {n:N0} rows: median of {StatisticsRounds} interleaved rounds (after a warm-up), ms; the spread is min–max of the rounds"));
        Console.WriteLine("| part | median ms | min–max | share of Compute |");
        Console.WriteLine("| --- | ---: | --- | ---: |");
        for (var k = 0; k < parts.Length; k++)
        {
            Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
                $"| {parts[k].Name} | {medians[k]:F1} | {samples[k].Min():F1}–{samples[k].Max():F1} | {medians[k] / medians[0]:P0} |"));
        }

        var rest = medians[0] - medians[3] - medians[4] - medians[5] - medians[6] - medians[7] - medians[8];
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"| the rest of Compute (input checks, the one pass of sums and bins, allocation), by difference | {rest:F1} | | {rest / medians[0]:P0} |"));
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"  the two fits are {(medians[7] + medians[8]) / medians[9]:F1} likelihood passes' worth ({medians[7] / medians[9]:F1} + {medians[8] / medians[9]:F1})"));

        Mergeable(p, y, logit);
    }

    private static double Logits(double[] p, double[] logit)
    {
        for (var i = 0; i < p.Length; i++)
        {
            var q = Math.Clamp(p[i], 1.0 / 9007199254740992.0, 1.0 - (1.0 / 9007199254740992.0));
            logit[i] = Math.Log(q) - Scorer.Engine.Numerics.Elementary.Log1P(-q);
        }

        return logit[0];
    }

    /// <summary>The per-row work of one Newton iteration of LogisticFit (its private Evaluate, copied).</summary>
    private static double OnePass(double[] x, byte[] outcome, double c, double b)
    {
        double logLik = 0.0, g0 = 0.0, g1 = 0.0, h00 = 0.0, h01 = 0.0, h11 = 0.0;
        for (var i = 0; i < x.Length; i++)
        {
            var xi = x[i];
            var eta = c + (b * xi);
            var e = Math.Exp(-Math.Abs(eta));
            var large = 1.0 / (1.0 + e);
            var small = e * large;
            var log1pE = Scorer.Engine.Numerics.Elementary.Log1P(e);
            double mu, complement;
            if (eta >= 0)
            {
                mu = large;
                complement = small;
            }
            else
            {
                mu = small;
                complement = large;
            }

            double residual;
            if (outcome[i] == 1)
            {
                logLik -= Math.Max(-eta, 0.0) + log1pE;
                residual = complement;
            }
            else
            {
                logLik -= Math.Max(eta, 0.0) + log1pE;
                residual = -mu;
            }

            var w = mu * complement;
            g0 += residual;
            g1 += residual * xi;
            h00 += w;
            h01 += w * xi;
            h11 += w * xi * xi;
        }

        return logLik + g0 + g1 + h00 + h01 + h11;
    }

    /// <summary>
    /// Prototype: hourly buckets of mergeable aggregates (kept as outcomes arrive), merged and turned into the report.
    /// Exact: the counts, sums and bins. Approximate: what needs the rows' order (AUC, Hosmer–Lemeshow groups) or the rows
    /// themselves (the two fits), here from a histogram of logit(p) in each bucket.
    /// </summary>
    private static void Mergeable(double[] p, byte[] y, double[] logit)
    {
        var n = p.Length;
        var exact = CalibrationStatistics.Compute(p, y, Level);
        Console.WriteLine();
        Console.WriteLine("Prototype: mergeable aggregates in 168 hourly buckets (rows spread evenly over 7 days), merged, then the report from the merged bucket:");
        Console.WriteLine("| histogram bins of logit(p) in [−20, 20] | build buckets from rows, ms | merge 168 + report, ms | |Δ AUC| | |Δ AUC se| | |Δ intercept| | |Δ slope| | HL exact → approx | |Δ O/E|, |Δ Brier|, |Δ ECE| |");
        Console.WriteLine("| ---: | ---: | ---: | ---: | ---: | ---: | ---: | --- | --- |");
        foreach (var bins in new[] { 1024, 8192 })
        {
            var buildMs = new List<double>();
            var mergeMs = new List<double>();
            MergedReport result = default;
            for (var round = 0; round <= StatisticsRounds; round++)
            {
                GC.Collect();
                var timer = Stopwatch.StartNew();
                var buckets = new Bucket[168];
                for (var h = 0; h < buckets.Length; h++)
                {
                    buckets[h] = new Bucket(bins);
                }

                for (var i = 0; i < n; i++)
                {
                    buckets[(int)((long)i * buckets.Length / n)].Add(p[i], logit[i], y[i]);
                }

                var build = timer.Elapsed.TotalMilliseconds;
                timer.Restart();
                var merged = new Bucket(bins);
                foreach (var bucket in buckets)
                {
                    merged.Merge(bucket);
                }

                result = merged.Report();
                var merge = timer.Elapsed.TotalMilliseconds;
                if (round > 0)
                {
                    buildMs.Add(build);
                    mergeMs.Add(merge);
                }
            }

            var hl = exact.HosmerLemeshow!;
            Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
                $"| {bins:N0} | {OutcomeIngestion.Median(buildMs):F1} | {OutcomeIngestion.Median(mergeMs):F2} | {Math.Abs(result.Auc - exact.Auc!.Estimate):E1} | {Math.Abs(result.AucSe - exact.Auc.Se):E1} | {Math.Abs(result.Intercept - exact.CalibrationIntercept!.Value.Estimate):E1} | {Math.Abs(result.Slope - exact.CalibrationSlope!.Value.Estimate):E1} | {hl.Statistic:F2} (P {hl.P:F3}) → {result.HosmerLemeshow:F2} (P {MathNet.Numerics.SpecialFunctions.GammaUpperRegularized(result.HosmerLemeshowGroups / 2.0, result.HosmerLemeshow / 2.0):F3}) | {Math.Abs(result.ObservedExpected - exact.ObservedExpected!.Value.Estimate):E1}, {Math.Abs(result.Brier - exact.Brier):E1}, {Math.Abs(result.Ece - exact.Ece):E1} |"));
        }

        Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"  exact: AUC {exact.Auc!.Estimate:F6} (se {exact.Auc.Se:E3}), intercept {exact.CalibrationIntercept!.Value.Estimate:F6} (se {exact.CalibrationIntercept.Value.Se:E2}), slope {exact.CalibrationSlope!.Value.Estimate:F6} (se {exact.CalibrationSlope.Value.Se:E2})"));
    }

    private readonly record struct MergedReport(
        double ObservedExpected, double Brier, double LogLoss, double SpiegelhalterZ, double Ece, double Auc, double AucSe, double Intercept, double Slope,
        double HosmerLemeshow, int HosmerLemeshowGroups);

    /// <summary>One bucket's aggregates: sums (exact, mergeable by addition) and a histogram of logit(p) by outcome.</summary>
    private sealed class Bucket(int scoreBins)
    {
        private const int Bins = 10;
        private const double Lo = -20.0;
        private const double Hi = 20.0;

        private readonly long[] _cases = new long[scoreBins];
        private readonly long[] _controls = new long[scoreBins];
        private readonly double[] _sumLogit = new double[scoreBins];
        private readonly double[] _sumP = new double[scoreBins];
        private readonly long[] _binCount = new long[Bins];
        private readonly long[] _binEvents = new long[Bins];
        private readonly double[] _binSum = new double[Bins];
        private long _n, _events;
        private double _expected, _squaredError, _logLoss, _spiegelNumerator, _spiegelVariance;

        public void Add(double p, double logit, byte y)
        {
            _n++;
            _events += y;
            _expected += p;
            var residual = y - p;
            _squaredError += residual * residual;
            var clipped = Math.Clamp(p, CalibrationStatistics.LogLossClip, 1.0 - CalibrationStatistics.LogLossClip);
            _logLoss -= y == 1 ? Math.Log(clipped) : Scorer.Engine.Numerics.Elementary.Log1P(-clipped);
            var oneMinusTwoP = 1.0 - (2.0 * p);
            _spiegelNumerator += residual * oneMinusTwoP;
            _spiegelVariance += oneMinusTwoP * oneMinusTwoP * p * (1.0 - p);
            var r = ReliabilityTable.BinOf(p, Bins);
            _binCount[r]++;
            _binEvents[r] += y;
            _binSum[r] += p;
            var s = Math.Clamp((int)((logit - Lo) / (Hi - Lo) * scoreBins), 0, scoreBins - 1);
            if (y == 1)
            {
                _cases[s]++;
            }
            else
            {
                _controls[s]++;
            }

            _sumLogit[s] += logit;
            _sumP[s] += p;
        }

        /// <summary>Writes the bucket as rows of the two aggregate tables (non-empty bins only).</summary>
        public void Save(SqliteCommand sums, SqliteCommand bins, long hour)
        {
            sums.Parameters["$hour"].Value = hour;
            sums.Parameters["$n"].Value = _n;
            sums.Parameters["$events"].Value = _events;
            sums.Parameters["$expected"].Value = _expected;
            sums.Parameters["$sq"].Value = _squaredError;
            sums.Parameters["$ll"].Value = _logLoss;
            sums.Parameters["$sn"].Value = _spiegelNumerator;
            sums.Parameters["$sv"].Value = _spiegelVariance;
            sums.ExecuteNonQuery();
            bins.Parameters["$hour"].Value = hour;
            for (var b = 0; b < Bins; b++)
            {
                if (_binCount[b] > 0)
                {
                    SaveBin(bins, 0, b, _binCount[b], _binEvents[b], _binSum[b], 0.0);
                }
            }

            for (var s = 0; s < scoreBins; s++)
            {
                if (_cases[s] + _controls[s] > 0)
                {
                    SaveBin(bins, 1, s, _cases[s] + _controls[s], _cases[s], _sumP[s], _sumLogit[s]);
                }
            }
        }

        private static void SaveBin(SqliteCommand bins, int kind, int bin, long count, long events, double sumP, double sumLogit)
        {
            bins.Parameters["$kind"].Value = kind;
            bins.Parameters["$bin"].Value = bin;
            bins.Parameters["$count"].Value = count;
            bins.Parameters["$events"].Value = events;
            bins.Parameters["$sumP"].Value = sumP;
            bins.Parameters["$sumLogit"].Value = sumLogit;
            bins.ExecuteNonQuery();
        }

        public void AddSums(long n, long events, double expected, double squaredError, double logLoss, double spiegelNumerator, double spiegelVariance)
        {
            _n += n;
            _events += events;
            _expected += expected;
            _squaredError += squaredError;
            _logLoss += logLoss;
            _spiegelNumerator += spiegelNumerator;
            _spiegelVariance += spiegelVariance;
        }

        public void AddBin(int kind, int bin, long count, long events, double sumP, double sumLogit)
        {
            if (kind == 0)
            {
                _binCount[bin] += count;
                _binEvents[bin] += events;
                _binSum[bin] += sumP;
            }
            else
            {
                _cases[bin] += events;
                _controls[bin] += count - events;
                _sumP[bin] += sumP;
                _sumLogit[bin] += sumLogit;
            }
        }

        public void Merge(Bucket other)
        {
            _n += other._n;
            _events += other._events;
            _expected += other._expected;
            _squaredError += other._squaredError;
            _logLoss += other._logLoss;
            _spiegelNumerator += other._spiegelNumerator;
            _spiegelVariance += other._spiegelVariance;
            for (var b = 0; b < Bins; b++)
            {
                _binCount[b] += other._binCount[b];
                _binEvents[b] += other._binEvents[b];
                _binSum[b] += other._binSum[b];
            }

            for (var s = 0; s < scoreBins; s++)
            {
                _cases[s] += other._cases[s];
                _controls[s] += other._controls[s];
                _sumLogit[s] += other._sumLogit[s];
                _sumP[s] += other._sumP[s];
            }
        }

        public MergedReport Report()
        {
            double n = _n, events = _events;
            var ece = 0.0;
            for (var b = 0; b < Bins; b++)
            {
                if (_binCount[b] > 0)
                {
                    ece += _binCount[b] / n * Math.Abs(((double)_binEvents[b] / _binCount[b]) - (_binSum[b] / _binCount[b]));
                }
            }

            // AUC and its DeLong variance: each histogram bin is a group of tied scores, its placements shared.
            double cases = _events, controls = _n - _events;
            double controlsBefore = 0, casesBefore = 0, twiceU = 0;
            for (var s = 0; s < scoreBins; s++)
            {
                twiceU += _cases[s] * ((2 * controlsBefore) + _controls[s]);
                controlsBefore += _controls[s];
            }

            var auc = twiceU / (2.0 * cases * controls);
            double sum10 = 0, sum01 = 0;
            controlsBefore = 0;
            for (var s = 0; s < scoreBins; s++)
            {
                var v10 = ((2.0 * controlsBefore) + _controls[s]) / (2.0 * controls);
                var v01 = ((2.0 * (cases - casesBefore - _cases[s])) + _cases[s]) / (2.0 * cases);
                sum10 += _cases[s] * (v10 - auc) * (v10 - auc);
                sum01 += _controls[s] * (v01 - auc) * (v01 - auc);
                controlsBefore += _controls[s];
                casesBefore += _cases[s];
            }

            var aucSe = Math.Sqrt((sum10 / (cases - 1) / cases) + (sum01 / (controls - 1) / controls));

            // The two fits on grouped data: x = the bin's mean logit, binomial counts.
            var x = new double[scoreBins];
            for (var s = 0; s < scoreBins; s++)
            {
                var count = _cases[s] + _controls[s];
                x[s] = count > 0 ? _sumLogit[s] / count : 0;
            }

            var intercept = GroupedFit(x, fitSlope: false).C;
            var slope = GroupedFit(x, fitSlope: true).B;

            // Hosmer–Lemeshow over deciles of the histogram (a group ends at the bin where the cumulative count crosses k·n/10).
            double statistic = 0, groupCount = 0, groupObserved = 0, groupExpected = 0, cumulative = 0;
            var groups = 0;
            var next = 1;
            for (var s = 0; s < scoreBins; s++)
            {
                var count = _cases[s] + _controls[s];
                groupCount += count;
                groupObserved += _cases[s];
                groupExpected += _sumP[s];
                cumulative += count;
                if ((cumulative >= next * n / 10.0 || s == scoreBins - 1) && groupCount > 0)
                {
                    var diff = groupObserved - groupExpected;
                    statistic += diff * diff / (groupExpected * (groupCount - groupExpected) / groupCount);
                    groups++;
                    groupCount = groupObserved = groupExpected = 0;
                    while (next <= 10 && cumulative >= next * n / 10.0)
                    {
                        next++;
                    }
                }
            }

            return new MergedReport(events / _expected, _squaredError / n, _logLoss / n, _spiegelNumerator / Math.Sqrt(_spiegelVariance), ece, auc, aucSe,
                intercept, slope, statistic, groups);
        }

        /// <summary>Newton on the grouped binomial likelihood: η = c + b·x (b fixed at 1 for the intercept fit).</summary>
        private (double C, double B) GroupedFit(double[] x, bool fitSlope)
        {
            double c = 0, b = 1;
            for (var iteration = 0; iteration < 50; iteration++)
            {
                double g0 = 0, g1 = 0, h00 = 0, h01 = 0, h11 = 0;
                for (var s = 0; s < x.Length; s++)
                {
                    double count = _cases[s] + _controls[s];
                    if (count == 0)
                    {
                        continue;
                    }

                    var mu = 1.0 / (1.0 + Math.Exp(-(c + (b * x[s]))));
                    var residual = _cases[s] - (count * mu);
                    var w = count * mu * (1 - mu);
                    g0 += residual;
                    g1 += residual * x[s];
                    h00 += w;
                    h01 += w * x[s];
                    h11 += w * x[s] * x[s];
                }

                double step0, step1;
                if (fitSlope)
                {
                    var det = (h00 * h11) - (h01 * h01);
                    step0 = ((h11 * g0) - (h01 * g1)) / det;
                    step1 = ((h00 * g1) - (h01 * g0)) / det;
                }
                else
                {
                    step0 = g0 / h00;
                    step1 = 0;
                }

                c += step0;
                b += step1;
                if (Math.Abs(step0) < 1e-12 && Math.Abs(step1) < 1e-12)
                {
                    break;
                }
            }

            return (c, b);
        }
    }

    /// <summary>The monitor's internal statistics, called through function pointers for timing them apart.</summary>
    private static unsafe class MonitorInternals
    {
        private static readonly delegate*<ReadOnlySpan<double>, ReadOnlySpan<byte>, out double, out double, bool> Intercept =
            (delegate*<ReadOnlySpan<double>, ReadOnlySpan<byte>, out double, out double, bool>)Pointer("LogisticFit", "TryFitIntercept");

        private static readonly delegate*<ReadOnlySpan<double>, ReadOnlySpan<byte>, out double, out double, out double, out double, bool> Line =
            (delegate*<ReadOnlySpan<double>, ReadOnlySpan<byte>, out double, out double, out double, out double, bool>)Pointer("LogisticFit", "TryFitLine");

        private static readonly delegate*<ReadOnlySpan<double>, ReadOnlySpan<byte>, double, AucEstimate> Auc =
            (delegate*<ReadOnlySpan<double>, ReadOnlySpan<byte>, double, AucEstimate>)Pointer("Discrimination", "FromSorted");

        private static readonly delegate*<ReadOnlySpan<double>, ReadOnlySpan<byte>, int, HosmerLemeshowTest?> Hl =
            (delegate*<ReadOnlySpan<double>, ReadOnlySpan<byte>, int, HosmerLemeshowTest?>)Pointer("HosmerLemeshow", "FromSorted");

        public static bool TryFitIntercept(ReadOnlySpan<double> offset, ReadOnlySpan<byte> outcome, out double estimate, out double se) =>
            Intercept(offset, outcome, out estimate, out se);

        public static bool TryFitLine(ReadOnlySpan<double> x, ReadOnlySpan<byte> outcome, out double intercept, out double slope, out double se0, out double se1) =>
            Line(x, outcome, out intercept, out slope, out se0, out se1);

        public static AucEstimate AucFromSorted(ReadOnlySpan<double> score, ReadOnlySpan<byte> outcome, double z) => Auc(score, outcome, z);

        public static HosmerLemeshowTest? HosmerLemeshowFromSorted(ReadOnlySpan<double> p, ReadOnlySpan<byte> outcome, int groups) => Hl(p, outcome, groups);

        private static nint Pointer(string type, string method) =>
            typeof(CalibrationStatistics).Assembly.GetType("Scorer.Monitor.Statistics." + type, throwOnError: true)!
                .GetMethod(method, BindingFlags.Public | BindingFlags.NonPublic | BindingFlags.Static)!.MethodHandle.GetFunctionPointer();
    }

    // ---------------------------------------------------------------------------------------------------------------
    // (b) The store read.
    // ---------------------------------------------------------------------------------------------------------------

    private static async Task StoreReadAsync(OutcomeIngestion.InventedLog data)
    {
        var file = Path.Combine(Path.GetTempPath(), "scorer-bench-report.db");
        var cover = OutcomeIngestion.Sibling(file, "cover");
        Console.WriteLine();
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture, $"(b) Store read: {data.Count:N0} predictions and outcomes written through the store into {file}"));
        await OutcomeIngestion.PrepareAsync(file, data);
        await using (var store = SqliteScorerStore.ForFile(file))
        {
            var timer = Stopwatch.StartNew();
            var positives = data.Order.Where(i => data.Y[i] == 1).ToArray();
            var reports = new List<OutcomeReport>(1000);
            for (var from = 0; from < positives.Length; from += 1000)
            {
                reports.Clear();
                reports.AddRange(positives.Skip(from).Take(1000).Select(i => new OutcomeReport(data.Ids[i], null, 1)));
                _ = await store.RecordOutcomesAsync(OutcomeIngestion.Model, reports, ConflictPolicy.KeepFirst, OutcomeIngestion.RecordedAt);
            }

            var positiveSeconds = timer.Elapsed.TotalSeconds;
            timer.Restart();
            var negatives = 0;
            int recorded;
            while ((recorded = await store.RecordImplicitNegativesAsync(OutcomeIngestion.Model, To, OutcomeIngestion.RecordedAt, 100_000)) > 0)
            {
                negatives += recorded;
            }

            Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
                $"  setup: {positives.Length:N0} positives by id (RecordOutcomesAsync, batches of 1,000) in {positiveSeconds:F1} s ({positives.Length / positiveSeconds:N0}/s); {negatives:N0} implicit negatives (RecordImplicitNegativesAsync) in {timer.Elapsed.TotalSeconds:F1} s ({negatives / timer.Elapsed.TotalSeconds:N0}/s)"));
        }

        OutcomeIngestion.Checkpoint(file);
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture, $"  database file {new FileInfo(file).Length / 1048576.0:F0} MiB"));

        var readMs = new List<double>();
        var arraysMs = new List<double>();
        var computeMs = new List<double>();
        var countMs = new List<double>();
        await using (var store = SqliteScorerStore.ForFile(file))
        {
            // No warm-up round: the writes just made leave the file in the OS page cache (a warm-up measured the same).
            for (var round = 1; round <= ReadRounds; round++)
            {
                GC.Collect();
                GC.WaitForPendingFinalizers();
                var before = GC.GetTotalAllocatedBytes(precise: true);
                var timer = Stopwatch.StartNew();
                var rows = await store.GetLabelledAsync(OutcomeIngestion.Model, OutcomeIngestion.Version, From, To);
                var read = timer.Elapsed.TotalMilliseconds;
                var bytes = GC.GetTotalAllocatedBytes(precise: true) - before;
                timer.Restart();
                var p = new double[rows.Count];
                var y = new byte[rows.Count];
                for (var i = 0; i < rows.Count; i++)
                {
                    p[i] = rows[i].Probability;
                    y[i] = rows[i].Outcome;
                }

                var arrays = timer.Elapsed.TotalMilliseconds;
                timer.Restart();
                _ = CalibrationStatistics.Compute(p, y, Level);
                var compute = timer.Elapsed.TotalMilliseconds;
                timer.Restart();
                _ = await store.CountPredictionsByMinuteAsync(OutcomeIngestion.Model, OutcomeIngestion.Version, From, To);
                var count = timer.Elapsed.TotalMilliseconds;
                if (rows.Count != data.Count)
                {
                    throw new InvalidOperationException($"GetLabelledAsync returned {rows.Count} rows, expected {data.Count}.");
                }

                Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
                    $"  round {round}: GetLabelledAsync {read:F0} ms ({bytes / 1048576.0:F0} MiB allocated), to arrays {arrays:F0} ms, Compute {compute:F0} ms, CountPredictionsByMinuteAsync {count:F1} ms: report core {read + arrays + compute + count:F0} ms"));
                readMs.Add(read);
                arraysMs.Add(arrays);
                computeMs.Add(compute);
                countMs.Add(count);
            }
        }

        var core = OutcomeIngestion.Median(readMs) + OutcomeIngestion.Median(arraysMs) + OutcomeIngestion.Median(computeMs) + OutcomeIngestion.Median(countMs);
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"  median of {ReadRounds}: GetLabelledAsync {OutcomeIngestion.Median(readMs):F0} ms, to arrays {OutcomeIngestion.Median(arraysMs):F0} ms, Compute {OutcomeIngestion.Median(computeMs):F0} ms, minute counts {OutcomeIngestion.Median(countMs):F1} ms: report core ≈ {core:F0} ms (target 200 ms)"));

        ReadExperiments(file, cover, data.Count);
        AggregateRead(cover, data);
        OutcomeIngestion.DeleteDatabase(cover);
        OutcomeIngestion.DeleteDatabase(file);
    }

    private static void ReadExperiments(string file, string cover, int expected)
    {
        // Copies: `cover` gets a covering index for p and y; `ordered` (deleted here) the store's index extended by prediction_id.
        const string where = "WHERE model = $model AND version = $version AND scored_at >= $from AND scored_at < $to";
        const string storeQuery =
            "SELECT prediction_id, version, stage, scored_at, eta, probability, outcome, implicit, recorded_at FROM outcomes " + where + " ORDER BY scored_at, prediction_id;";
        const string twoColumns = "SELECT probability, outcome FROM outcomes " + where + ";";
        const string sums = "SELECT count(*), sum(outcome), sum(probability) FROM outcomes " + where + ";";
        OutcomeIngestion.CopyDatabase(file, cover);
        var indexTimer = Stopwatch.StartNew();
        using (var connection = OutcomeIngestion.Open(cover))
        {
            using var create = OutcomeIngestion.Command(connection, null,
                "CREATE INDEX outcomes_cover ON outcomes (model, version, scored_at, probability, outcome);");
            create.ExecuteNonQuery();
        }

        var indexSeconds = indexTimer.Elapsed.TotalSeconds;
        OutcomeIngestion.Checkpoint(cover);

        // A second copy whose (model, version, scored_at) index ends with prediction_id, the store's ORDER BY's last term.
        var ordered = OutcomeIngestion.Sibling(file, "ordered");
        OutcomeIngestion.CopyDatabase(file, ordered);
        using (var connection = OutcomeIngestion.Open(ordered))
        {
            using var create = OutcomeIngestion.Command(connection, null,
                "DROP INDEX outcomes_by_version_time; CREATE INDEX outcomes_by_version_time ON outcomes (model, version, scored_at, prediction_id);");
            create.ExecuteNonQuery();
        }

        OutcomeIngestion.Checkpoint(ordered);

        var cases = new (string Name, string File, string Sql, Func<SqliteCommand, int> Run)[]
        {
            ("R1 the store's query, SqliteDataReader, p and y into arrays only (no row objects)", file, storeQuery, c => ReadInto(c, 5, 6)),
            ("R1b R1 with the index extended to (model, version, scored_at, prediction_id): no sorter", ordered, storeQuery, c => ReadInto(c, 5, 6)),
            ("R3 p and y only, no ORDER BY (index order; no statistic needs the order), store's indexes", file, twoColumns, c => ReadInto(c, 0, 1)),
            ("R4 R3 with a covering index (model, version, scored_at, probability, outcome)", cover, twoColumns, c => ReadInto(c, 0, 1)),
            ("R5 R4 stepped raw (SQLitePCLRaw, no SqliteDataReader)", cover, twoColumns, ReadRaw),
            ("R6 SQL aggregate count/sum over R4's rows (the scan alone, nothing marshalled)", cover, sums, c => Convert.ToInt32(c.ExecuteScalar(), CultureInfo.InvariantCulture)),
        };

        var samples = cases.Select(_ => new List<double>()).ToArray();
        for (var round = 1; round <= ReadRounds; round++)
        {
            for (var k = 0; k < cases.Length; k++)
            {
                using var connection = OutcomeIngestion.Open(cases[k].File);
                using var command = OutcomeIngestion.Command(connection, null, cases[k].Sql);
                command.Parameters.AddWithValue("$model", OutcomeIngestion.Model);
                command.Parameters.AddWithValue("$version", OutcomeIngestion.Version);
                command.Parameters.AddWithValue("$from", OutcomeIngestion.StoreMicroseconds(From));
                command.Parameters.AddWithValue("$to", OutcomeIngestion.StoreMicroseconds(To));
                GC.Collect();
                GC.WaitForPendingFinalizers();
                var timer = Stopwatch.StartNew();
                var rows = cases[k].Run(command);
                var ms = timer.Elapsed.TotalMilliseconds;
                if (rows != expected)
                {
                    throw new InvalidOperationException($"{cases[k].Name} read {rows} rows, expected {expected}.");
                }

                samples[k].Add(ms);
            }
        }

        Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"  Raw reads of the same rows, median of {ReadRounds} interleaved rounds (the page cache warm from the rounds above; covering index built on a copy in {indexSeconds:F1} s):"));
        Console.WriteLine("| read | median ms | min–max |");
        Console.WriteLine("| --- | ---: | --- |");
        for (var k = 0; k < cases.Length; k++)
        {
            Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
                $"| {cases[k].Name} | {OutcomeIngestion.Median(samples[k]):F0} | {samples[k].Min():F0}–{samples[k].Max():F0} |"));
        }

        foreach (var (name, planFile, sql) in new[]
        {
            ("store query, store's indexes", file, storeQuery), ("store query, extended index", ordered, storeQuery), ("p and y, covering index", cover, twoColumns),
        })
        {
            using var connection = OutcomeIngestion.Open(planFile);
            using var command = OutcomeIngestion.Command(connection, null, "EXPLAIN QUERY PLAN " + sql);
            command.Parameters.AddWithValue("$model", OutcomeIngestion.Model);
            command.Parameters.AddWithValue("$version", OutcomeIngestion.Version);
            command.Parameters.AddWithValue("$from", 0L);
            command.Parameters.AddWithValue("$to", 1L);
            using var reader = command.ExecuteReader();
            var steps = new List<string>();
            while (reader.Read())
            {
                steps.Add(reader.GetString(3));
            }

            Console.WriteLine($"  plan ({name}): {string.Join("; ", steps)}");
        }

        OutcomeIngestion.DeleteDatabase(ordered);
    }

    /// <summary>
    /// The proposal, end to end: hourly aggregate rows (what the store would keep in the outcome's transaction, as it
    /// keeps prediction_minutes), here built from the invented rows (untimed) into two WITHOUT ROWID tables on the copy;
    /// then timed: read the window's hours, merge, and compute the report from the merged aggregates.
    /// </summary>
    private static void AggregateRead(string file, OutcomeIngestion.InventedLog data)
    {
        const int scoreBins = 1024;
        const long microsecondsPerHour = 3_600_000_000;
        var setup = Stopwatch.StartNew();
        var hours = new SortedDictionary<long, Bucket>();
        for (var i = 0; i < data.Count; i++)
        {
            var hour = data.ScoredAtUs[i] / microsecondsPerHour;
            if (!hours.TryGetValue(hour, out var bucket))
            {
                hours[hour] = bucket = new Bucket(scoreBins);
            }

            var q = Math.Clamp(data.P[i], 1.0 / 9007199254740992.0, 1.0 - (1.0 / 9007199254740992.0));
            bucket.Add(data.P[i], Math.Log(q) - Scorer.Engine.Numerics.Elementary.Log1P(-q), data.Y[i]);
        }

        using (var connection = OutcomeIngestion.Open(file))
        {
            using (var create = OutcomeIngestion.Command(connection, null, AggregateSchema))
            {
                create.ExecuteNonQuery();
            }

            using var transaction = connection.BeginTransaction();
            using var sums = OutcomeIngestion.Command(connection, transaction,
                "INSERT INTO outcome_hours VALUES ($model, $version, $hour, $n, $events, $expected, $sq, $ll, $sn, $sv);");
            using var bins = OutcomeIngestion.Command(connection, transaction,
                "INSERT INTO outcome_hour_bins VALUES ($model, $version, $hour, $kind, $bin, $count, $events, $sumP, $sumLogit);");
            foreach (var (command, names) in new[]
            {
                (sums, new[] { "$hour", "$n", "$events", "$expected", "$sq", "$ll", "$sn", "$sv" }),
                (bins, new[] { "$hour", "$kind", "$bin", "$count", "$events", "$sumP", "$sumLogit" }),
            })
            {
                command.Parameters.AddWithValue("$model", OutcomeIngestion.Model);
                command.Parameters.AddWithValue("$version", OutcomeIngestion.Version);
                foreach (var name in names)
                {
                    command.Parameters.Add(name, SqliteType.Real);
                }
            }

            foreach (var (hour, bucket) in hours)
            {
                bucket.Save(sums, bins, hour);
            }

            transaction.Commit();
        }

        OutcomeIngestion.Checkpoint(file);
        long binRows;
        using (var connection = OutcomeIngestion.Open(file))
        using (var count = OutcomeIngestion.Command(connection, null, "SELECT count(*) FROM outcome_hour_bins;"))
        {
            binRows = Convert.ToInt64(count.ExecuteScalar(), CultureInfo.InvariantCulture);
        }

        var setupSeconds = setup.Elapsed.TotalSeconds;
        var fromHour = OutcomeIngestion.StoreMicroseconds(From) / microsecondsPerHour;
        var toHour = (OutcomeIngestion.StoreMicroseconds(To) / microsecondsPerHour) + 1;
        var samples = new List<double>();
        var readSamples = new List<double>();
        var rawSamples = new List<double>();
        var rawReadSamples = new List<double>();
        MergedReport report = default;
        for (var round = 0; round <= 2 * ReadRounds; round++)
        {
            GC.Collect();
            var timer = Stopwatch.StartNew();
            using var connection = OutcomeIngestion.Open(file);
            var merged = new Bucket(scoreBins);
            using (var sums = OutcomeIngestion.Command(connection, null,
                "SELECT sum(n), sum(events), sum(expected), sum(squared_error), sum(log_loss), sum(spiegel_numerator), sum(spiegel_variance) FROM outcome_hours "
                + "WHERE model = $model AND version = $version AND hour >= $from AND hour < $to;"))
            {
                sums.Parameters.AddWithValue("$model", OutcomeIngestion.Model);
                sums.Parameters.AddWithValue("$version", OutcomeIngestion.Version);
                sums.Parameters.AddWithValue("$from", fromHour);
                sums.Parameters.AddWithValue("$to", toHour);
                using var reader = sums.ExecuteReader();
                _ = reader.Read();
                merged.AddSums(reader.GetInt64(0), reader.GetInt64(1), reader.GetDouble(2), reader.GetDouble(3), reader.GetDouble(4), reader.GetDouble(5), reader.GetDouble(6));
            }

            const string binsSql =
                "SELECT kind, bin, count, events, sum_p, sum_logit FROM outcome_hour_bins WHERE model = ?1 AND version = ?2 AND hour >= ?3 AND hour < ?4;";
            if (round % 2 == 1 || round == 0)
            {
                // Through SqliteDataReader.
                using var bins = OutcomeIngestion.Command(connection, null, binsSql);
                bins.Parameters.AddWithValue("?1", OutcomeIngestion.Model);
                bins.Parameters.AddWithValue("?2", OutcomeIngestion.Version);
                bins.Parameters.AddWithValue("?3", fromHour);
                bins.Parameters.AddWithValue("?4", toHour);
                using var reader = bins.ExecuteReader();
                while (reader.Read())
                {
                    merged.AddBin(reader.GetInt32(0), reader.GetInt32(1), reader.GetInt64(2), reader.GetInt64(3), reader.GetDouble(4), reader.GetDouble(5));
                }
            }
            else
            {
                // Stepped raw.
                var db = connection.Handle!;
                _ = raw.sqlite3_prepare_v2(db, binsSql, out var statement);
                using (statement)
                {
                    _ = raw.sqlite3_bind_text16(statement, 1, OutcomeIngestion.Model.AsSpan());
                    _ = raw.sqlite3_bind_text16(statement, 2, OutcomeIngestion.Version.AsSpan());
                    _ = raw.sqlite3_bind_int64(statement, 3, fromHour);
                    _ = raw.sqlite3_bind_int64(statement, 4, toHour);
                    while (raw.sqlite3_step(statement) == raw.SQLITE_ROW)
                    {
                        merged.AddBin(raw.sqlite3_column_int(statement, 0), raw.sqlite3_column_int(statement, 1), raw.sqlite3_column_int64(statement, 2),
                            raw.sqlite3_column_int64(statement, 3), raw.sqlite3_column_double(statement, 4), raw.sqlite3_column_double(statement, 5));
                    }
                }
            }

            var read = timer.Elapsed.TotalMilliseconds;
            report = merged.Report();
            if (round > 0)
            {
                (round % 2 == 1 ? samples : rawSamples).Add(timer.Elapsed.TotalMilliseconds);
                (round % 2 == 1 ? readSamples : rawReadSamples).Add(read);
            }
        }

        Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"  Proposal end to end: {hours.Count} hourly aggregate rows + {binRows:N0} bin rows ({scoreBins:N0} logit bins; built and written untimed in {setupSeconds:F1} s); read the window, merge and compute the report (median of {ReadRounds}): {OutcomeIngestion.Median(samples):F1} ms through SqliteDataReader (min–max {samples.Min():F1}–{samples.Max():F1}; reading and merging {OutcomeIngestion.Median(readSamples):F1} ms), {OutcomeIngestion.Median(rawSamples):F1} ms stepped raw (min–max {rawSamples.Min():F1}–{rawSamples.Max():F1}; reading and merging {OutcomeIngestion.Median(rawReadSamples):F1} ms); AUC {report.Auc:F6}, slope {report.Slope:F6}, intercept {report.Intercept:F6}, O/E {report.ObservedExpected:F6}"));
    }

    /// <summary>
    /// The proposed aggregate tables: per (model, version, hour of scoring time) the exact sums, and per (hour, kind,
    /// bin) the reliability bins (kind 0, 10 equal-width bins of p) and the histogram of logit(p) (kind 1, 1,024 bins
    /// over [−20, 20]) with count, events, Σp and Σlogit(p).
    /// </summary>
    internal const string AggregateSchema =
        "CREATE TABLE outcome_hours (model TEXT NOT NULL, version TEXT NOT NULL, hour INTEGER NOT NULL, n INTEGER NOT NULL, events INTEGER NOT NULL, "
        + "expected REAL NOT NULL, squared_error REAL NOT NULL, log_loss REAL NOT NULL, spiegel_numerator REAL NOT NULL, spiegel_variance REAL NOT NULL, "
        + "PRIMARY KEY (model, version, hour)) WITHOUT ROWID; "
        + "CREATE TABLE outcome_hour_bins (model TEXT NOT NULL, version TEXT NOT NULL, hour INTEGER NOT NULL, kind INTEGER NOT NULL, bin INTEGER NOT NULL, "
        + "count INTEGER NOT NULL, events INTEGER NOT NULL, sum_p REAL NOT NULL, sum_logit REAL NOT NULL, PRIMARY KEY (model, version, hour, kind, bin)) WITHOUT ROWID;";

    private static int ReadInto(SqliteCommand command, int pColumn, int yColumn)
    {
        var p = new List<double>(1 << 20);
        var y = new List<byte>(1 << 20);
        using var reader = command.ExecuteReader();
        while (reader.Read())
        {
            p.Add(reader.GetDouble(pColumn));
            y.Add((byte)reader.GetInt64(yColumn));
        }

        return p.Count;
    }

    private static int ReadRaw(SqliteCommand command)
    {
        var db = command.Connection!.Handle!;
        var sql = command.CommandText.Replace("$model", "?1", StringComparison.Ordinal).Replace("$version", "?2", StringComparison.Ordinal)
            .Replace("$from", "?3", StringComparison.Ordinal).Replace("$to", "?4", StringComparison.Ordinal);
        _ = raw.sqlite3_prepare_v2(db, sql, out var statement);
        using (statement)
        {
            _ = raw.sqlite3_bind_text16(statement, 1, OutcomeIngestion.Model.AsSpan());
            _ = raw.sqlite3_bind_text16(statement, 2, OutcomeIngestion.Version.AsSpan());
            _ = raw.sqlite3_bind_int64(statement, 3, (long)command.Parameters["$from"].Value!);
            _ = raw.sqlite3_bind_int64(statement, 4, (long)command.Parameters["$to"].Value!);
            var p = new List<double>(1 << 20);
            var y = new List<byte>(1 << 20);
            int rc;
            while ((rc = raw.sqlite3_step(statement)) == raw.SQLITE_ROW)
            {
                p.Add(raw.sqlite3_column_double(statement, 0));
                y.Add((byte)raw.sqlite3_column_int(statement, 1));
            }

            if (rc != raw.SQLITE_DONE)
            {
                SqliteException.ThrowExceptionForRC(rc, db);
            }

            return p.Count;
        }
    }
}
