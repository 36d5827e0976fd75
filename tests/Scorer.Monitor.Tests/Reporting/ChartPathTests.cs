using Scorer.Monitor.Reporting;
using Scorer.Statistics.Sequential;

namespace Scorer.Monitor.Tests.Reporting;

/// <summary>
/// The path a CUSUM chart keeps for drawing (ChartPath): checked against the chart's every value, recorded beside it.
/// The outcomes are seeded draws from the probabilities themselves (the stream the chart is built for, in control); the
/// chart is the project's RiskAdjustedCusum, whose weights are checked against Steiner et al. (2000) in its own tests.
/// </summary>
public sealed class ChartPathTests
{
    private static readonly DateTimeOffset T0 = new(2027, 3, 1, 0, 0, 0, TimeSpan.Zero);

    /// <summary>n outcomes spread evenly over <paramref name="days"/>, through a chart and a path; every (index, time, S) as well.</summary>
    private static (ChartPath Path, List<CusumPoint> All) Run(int n, double days, int tail, int keepDays)
    {
        var random = new Random(20270301);
        var chart = new RiskAdjustedCusum(2.0, 6.0);
        var path = new ChartPath(tail, keepDays);
        var all = new List<CusumPoint>(n);
        for (var i = 0; i < n; i++)
        {
            var p = 0.05 + (0.3 * random.NextDouble());
            var at = T0 + (TimeSpan.FromDays(days) * (i / (double)n));
            chart.Add(p, random.NextDouble() < p ? (byte)1 : (byte)0, out var s);
            path.Add(chart.Steps, at, s);
            all.Add(new CusumPoint(chart.Steps, at, s));
        }

        return (path, all);
    }

    [Fact]
    public void The_tail_is_exact_and_before_it_each_hour_gives_its_true_lowest_and_highest_value()
    {
        var (path, all) = Run(100_000, 3, tail: 256, keepDays: 30);
        var points = path.Points(DateTimeOffset.MinValue, DateTimeOffset.MaxValue);
        Assert.Equal(all.TakeLast(256), points.TakeLast(256));
        Assert.True(points.Zip(points.Skip(1)).All(p => p.First.Index < p.Second.Index));

        var tailStart = all[^256].Index;
        foreach (var hour in all.Where(p => p.Index < tailStart).GroupBy(p => p.Time.UtcTicks / TimeSpan.TicksPerHour))
        {
            var start = new DateTimeOffset(hour.Key * TimeSpan.TicksPerHour, TimeSpan.Zero);
            var kept = points.Where(p => p.Index < tailStart && p.Time == start).ToList();
            Assert.Contains(kept, p => p.Value == hour.Max(x => x.Value));
            Assert.Contains(kept, p => p.Value == hour.Min(x => x.Value));
            Assert.All(kept, p => Assert.Equal(all[(int)p.Index - 1].Value, p.Value)); // each kept value is the chart's at that position
        }

        // 72 hours, at most two points each, and the tail.
        Assert.InRange(points.Count, 256 + 72, 256 + 144);
    }

    [Fact]
    public void Hours_older_than_the_days_kept_leave_and_the_saved_path_stays_bounded_whatever_the_volume()
    {
        var (path, _) = Run(200_000, 20, tail: 100, keepDays: 7);
        var saved = path.Save();
        Assert.Equal(100, saved.Tail.Length);
        Assert.InRange(saved.Hours.Length, 7 * 24, (7 * 24) + 1);
        Assert.True(saved.Hours[0].Hour >= (T0.AddDays(13).UtcTicks / TimeSpan.TicksPerHour) - 1);

        var restored = ChartPath.Restore(100, 7, saved);
        var window = (T0.AddDays(15), T0.AddDays(18));
        Assert.Equal(path.Points(window.Item1, window.Item2), restored.Points(window.Item1, window.Item2));
        Assert.All(restored.Points(window.Item1, window.Item2), p => Assert.InRange(p.Time, window.Item1, window.Item2));
    }
}
