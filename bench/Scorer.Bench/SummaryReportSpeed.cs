using System.Diagnostics;
using System.Globalization;
using Scorer.Statistics;
using Scorer.Statistics.Summaries;

namespace Scorer.Bench;

/// <summary>
/// The summarised report's cost (docs/performance.md "Summarised reports"): a 30-day window merged from 30 day buckets
/// and 48 hour buckets whose η bins are all occupied (the most a bucket can hold, whatever its rows), with 1 billion
/// labelled predictions' worth of counts (synthesised: one bucket of 1 million seeded rows spread over the whole η range,
/// merged into itself to make each day's 33.3 million), then the statistics. Against, in the same run, the exact report
/// over 1 million rows, the largest window the default ExactRows computes exactly. Medians of 21 runs.
/// </summary>
public static class SummaryReportSpeed
{
    public static void Run()
    {
        var random = new Random(20261203);
        var hourBucket = new LabelledSummary();
        var p = new double[1_000_000];
        var y = new byte[p.Length];
        for (var i = 0; i < p.Length; i++)
        {
            var eta = -20.0 + 40.0 * random.NextDouble();
            p[i] = 1.0 / (1.0 + Math.Exp(-eta));
            y[i] = random.NextDouble() < p[i] ? (byte)1 : (byte)0;
            hourBucket.Add(p[i], y[i]);
        }

        var day = new LabelledSummary();
        for (var k = 0; k < 33; k++)
        {
            day.Add(hourBucket);
        }

        var dayBytes = day.Write();
        var hourBytes = hourBucket.Write();
        var buckets = Enumerable.Repeat(dayBytes, 30).Concat(Enumerable.Repeat(hourBytes, 48)).ToArray();
        var rows = 30 * day.Count + 48 * hourBucket.Count;
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"buckets: {buckets.Length} ({hourBucket.OccupiedBins} occupied bins each, {dayBytes.Length:N0} bytes a document); rows: {rows:N0}"));

        var summarised = Median(() =>
        {
            var merged = new LabelledSummary();
            foreach (var bucket in buckets)
            {
                merged.AddStored(bucket);
            }

            _ = SummaryStatistics.Compute(merged);
        });
        Array.Sort(p, y);
        var exact = Median(() => _ = CalibrationStatistics.ComputeSorted(p, y));
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"summarised 30-day report over {rows / 1e9:F2} billion rows: median {summarised:F1} ms; exact report over 1 million rows: median {exact:F1} ms; ratio {summarised / exact:F3}"));
    }

    private static double Median(Action work)
    {
        var times = new double[21];
        work();
        for (var i = 0; i < times.Length; i++)
        {
            var clock = Stopwatch.StartNew();
            work();
            times[i] = clock.Elapsed.TotalMilliseconds;
        }

        Array.Sort(times);
        return times[times.Length / 2];
    }
}
