using System.Diagnostics;
using System.Globalization;
using Scorer.Monitor.Reporting;
using Scorer.Statistics;
using Scorer.Store;
using Scorer.Store.Sqlite;

namespace Scorer.Bench;

/// <summary>
/// `--report LABELLED`: the cost of a monitor report over LABELLED labelled predictions (the case: 1,000,000
/// in under 200 ms). Invented data from a seeded generator: η ~ N(−1.7, 1), p = logistic(η), y ~ Bernoulli(p).
/// </summary>
/// <remarks>
/// (a) The statistics alone: <see cref="CalibrationStatistics.Compute"/> on rows in arrival order (it copies and
/// sorts) against <see cref="CalibrationStatistics.ComputeSorted"/> on rows in p order, as the row cache hands them
/// over; median of 5 interleaved rounds after a warm-up.
/// (b) The report as the service makes it: the predictions written to a SQLite store in a temp file, all but the last
/// 1,000 labelled (positives by id in shuffled order, the rest as implicit negatives); a <see cref="LabelledCache"/>
/// over the store loads them once (timed: a replica's first report after start); then each round is what
/// MonitorReporter does for a window: the cache's refresh and window, ComputeSorted, the per-minute prediction count
/// and the drift counts. Rounds with nothing new, and rounds after 100 new outcomes each, medians. Finally the
/// report's statistics are checked against Compute over the generator's own arrays (the exact statistics).
/// </remarks>
internal static class ReportSpeed
{
    private const int Rounds = 5;
    private const int Unlabelled = 1000;
    private const double Level = 0.95;

    private static readonly DateTimeOffset From = OutcomeIngestion.Start;
    private static readonly DateTimeOffset To = OutcomeIngestion.Start.AddDays(7).AddMinutes(1);

    public static async Task RunAsync(int labelled)
    {
        ArgumentOutOfRangeException.ThrowIfLessThan(labelled, 10_000);
        var data = new OutcomeIngestion.InventedLog(labelled + Unlabelled, 20261204);
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"{labelled:N0} invented labelled predictions (+{Unlabelled:N0} labelled during the run); {Environment.ProcessorCount} cores, server GC {System.Runtime.GCSettings.IsServerGC}"));
        Statistics(data.P.AsSpan(0, labelled).ToArray(), data.Y.AsSpan(0, labelled).ToArray());
        await ServiceReportAsync(data, labelled);
    }

    private static void Statistics(double[] p, byte[] y)
    {
        var sortedP = p.ToArray();
        var sortedY = y.ToArray();
        Array.Sort(sortedP, sortedY);
        var compute = new List<double>();
        var sorted = new List<double>();
        for (var round = 0; round <= Rounds; round++)
        {
            var a = Time(() => CalibrationStatistics.Compute(p, y, Level));
            var b = Time(() => CalibrationStatistics.ComputeSorted(sortedP, sortedY, Level));
            if (round > 0)
            {
                compute.Add(a);
                sorted.Add(b);
            }
        }

        Console.WriteLine();
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture, $"(a) statistics over {p.Length:N0} rows, median of {Rounds} (min–max), ms"));
        Console.WriteLine("| call | median ms | min–max |");
        Console.WriteLine("| --- | ---: | --- |");
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture, $"| Compute (rows in arrival order: copy and sort) | {OutcomeIngestion.Median(compute):F1} | {compute.Min():F1}–{compute.Max():F1} |"));
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture, $"| ComputeSorted (rows in p order) | {OutcomeIngestion.Median(sorted):F1} | {sorted.Min():F1}–{sorted.Max():F1} |"));
    }

    private static async Task ServiceReportAsync(OutcomeIngestion.InventedLog data, int labelled)
    {
        var file = Path.Combine(Path.GetTempPath(), "scorer-bench-report.db");
        Console.WriteLine();
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture, $"(b) the service's report: {data.Count:N0} predictions written through the store into {file}"));
        await OutcomeIngestion.PrepareAsync(file, data);
        await using var store = SqliteScorerStore.ForFile(file);
        var model = OutcomeIngestion.Model;
        var version = OutcomeIngestion.Version;

        var setup = Stopwatch.StartNew();
        var positives = data.Order.Where(i => i < labelled && data.Y[i] == 1).ToArray();
        for (var from = 0; from < positives.Length; from += 1000)
        {
            var batch = positives.Skip(from).Take(1000).Select(i => new OutcomeReport(data.Ids[i], null, 1)).ToArray();
            _ = await store.RecordOutcomesAsync(model, batch, ConflictPolicy.KeepFirst, OutcomeIngestion.RecordedAt);
        }

        // Implicit negatives for the first `labelled` predictions only: they mature before the first unlabelled one.
        var cutoff = data.ScoredAt[labelled];
        while (await store.RecordImplicitNegativesAsync(model, cutoff, OutcomeIngestion.RecordedAt, 100_000) > 0)
        {
        }

        Console.WriteLine(string.Create(CultureInfo.InvariantCulture, $"  setup (positives by id, implicit negatives): {setup.Elapsed.TotalSeconds:F1} s"));

        var cache = new LabelledCache(store, new MonitorOptions());
        var load = Stopwatch.StartNew();
        using (var first = await cache.WindowAsync(model, version, From, To))
        {
            if (first.Count != labelled)
            {
                throw new InvalidOperationException($"The cache holds {first.Count} rows, expected {labelled}.");
            }
        }

        Console.WriteLine(string.Create(CultureInfo.InvariantCulture, $"  first load of the cache ({labelled:N0} rows from the change feed): {load.Elapsed.TotalMilliseconds:F0} ms"));

        var quiet = new List<double>();
        var busy = new List<double>();
        var next = labelled;
        CalibrationReport? last = null;
        for (var round = 0; round <= Rounds; round++)
        {
            GC.Collect();
            var timer = Stopwatch.StartNew();
            last = await ReportAsync(store, cache, model, version);
            if (round > 0)
            {
                quiet.Add(timer.Elapsed.TotalMilliseconds);
            }

            var fresh = Enumerable.Range(next, 100).Select(i => new OutcomeReport(data.Ids[i], null, data.Y[i])).ToArray();
            next += 100;
            _ = await store.RecordOutcomesAsync(model, fresh, ConflictPolicy.KeepFirst, OutcomeIngestion.RecordedAt);
            GC.Collect();
            timer.Restart();
            last = await ReportAsync(store, cache, model, version);
            if (round > 0)
            {
                busy.Add(timer.Elapsed.TotalMilliseconds);
            }
        }

        Console.WriteLine(string.Create(CultureInfo.InvariantCulture, $"  report rounds, median of {Rounds} (min–max), ms:"));
        Console.WriteLine("| report over all labelled rows | median ms | min–max |");
        Console.WriteLine("| --- | ---: | --- |");
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture, $"| nothing new since the last report | {OutcomeIngestion.Median(quiet):F1} | {quiet.Min():F1}–{quiet.Max():F1} |"));
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture, $"| 100 new outcomes since the last report | {OutcomeIngestion.Median(busy):F1} | {busy.Min():F1}–{busy.Max():F1} |"));

        // Exactness: the last report against Compute over the same rows taken from the generator's arrays.
        var n = next;
        var exact = CalibrationStatistics.Compute(data.P.AsSpan(0, n), data.Y.AsSpan(0, n), Level);
        var r = last!;
        if (r.Labelled != exact.Labelled || r.Events != exact.Events)
        {
            throw new InvalidOperationException($"The report has {r.Labelled} rows and {r.Events} events, the data {exact.Labelled} and {exact.Events}.");
        }

        double Rel(double a, double b) => Math.Abs(a - b) / Math.Max(Math.Abs(b), 1e-300);
        var sums = new[] { Rel(r.Brier, exact.Brier), Rel(r.LogLoss, exact.LogLoss), Rel(r.Ece, exact.Ece), Rel(r.Expected, exact.Expected) }.Max();
        var auc = Rel(r.Auc!.Estimate, exact.Auc!.Estimate);
        var fits = new[] { Rel(r.CalibrationIntercept!.Value.Estimate, exact.CalibrationIntercept!.Value.Estimate),
            Rel(r.CalibrationSlope!.Value.Estimate, exact.CalibrationSlope!.Value.Estimate), Rel(r.CalibrationSlope.Value.Se, exact.CalibrationSlope.Value.Se) }.Max();
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"  exactness against Compute over the generator's {n:N0} rows: sums {sums:E1}, AUC {auc:E1}, fits {fits:E1} (relative; targets 1e-9, 1e-9, 1e-6)"));
    }

    /// <summary>What MonitorReporter reads and computes for one window (the status rules and charts are not timed: they are constant-time).</summary>
    private static async Task<CalibrationReport> ReportAsync(IScorerStore store, LabelledCache cache, string model, string version)
    {
        CalibrationReport report;
        using (var rows = await cache.WindowAsync(model, version, From, To))
        {
            report = CalibrationStatistics.ComputeSorted(rows.Probability, rows.Outcome, Level);
        }

        _ = await store.CountPredictionsByMinuteAsync(model, version, From, To);
        _ = await store.GetDriftCountsAsync(model, version, From, To);
        return report;
    }

    private static double Time(Func<object> body)
    {
        GC.Collect();
        GC.WaitForPendingFinalizers();
        var timer = Stopwatch.StartNew();
        _ = body();
        return timer.Elapsed.TotalMilliseconds;
    }
}
