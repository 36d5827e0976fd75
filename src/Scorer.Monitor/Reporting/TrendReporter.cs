using Scorer.Statistics.Sequential;
using Scorer.Statistics;
using Scorer.Registry;
using Scorer.Store;

namespace Scorer.Monitor.Reporting;

/// <summary>
/// One bucket of prediction time: its labelled predictions and the calibration intercept, slope and AUC computed over
/// them alone (each null when it cannot be estimated there, as in the report).
/// </summary>
public sealed record TrendBucket(DateTimeOffset From, DateTimeOffset To, int Labelled, int Events, double Expected, FittedValue? Intercept,
    FittedValue? Slope, AucEstimate? Auc);

/// <summary>
/// The calibration intercept and slope and the AUC of a version over time: the window cut into buckets of one
/// <see cref="Step"/>, aligned to whole multiples of it since the Unix epoch, from the bucket of the window's first
/// labelled prediction to the bucket of now.
/// </summary>
public sealed record TrendView(string Window, DateTimeOffset From, DateTimeOffset To, TimeSpan Step, double Level, IReadOnlyList<TrendBucket> Buckets);

/// <summary>One point of a CUSUM path: the 1-based position of the outcome among the chart's, its prediction time, S after it (before any reset).</summary>
public sealed record CusumPoint(long Index, DateTimeOffset Time, double Value);

/// <summary>
/// The path of one CUSUM chart over the window, as the chart kept it: at most the asked number of points (in each
/// group of consecutive points its lowest and highest S), the chart's threshold and value now, its signals within the window.
/// </summary>
public sealed record CusumPath(double OddsRatio, double Threshold, long Steps, double Value, IReadOnlyList<CusumPoint> Points,
    IReadOnlyList<ChartSignal> Signals);

/// <summary>Both CUSUM paths of a version; null paths and <see cref="Waiting"/> when the charts have not started.</summary>
public sealed record CusumPaths(string Window, DateTimeOffset From, DateTimeOffset To, CusumPath? Up, CusumPath? Down, long Outcomes, DateTimeOffset? Through,
    string? Waiting);

/// <summary>
/// What the page draws over time and the report does not hold: the calibration intercept and slope and the AUC per
/// bucket of prediction time (<see cref="TrendAsync"/>), and the paths of the CUSUM charts (<see cref="CusumAsync"/>).
/// </summary>
public sealed class TrendReporter(LabelledCache labelled, ChartRunner charts, MonitorOptions options, TimeProvider time)
{
    /// <summary>The bucket lengths a trend chooses from: the shortest that keeps the buckets within the asked number.</summary>
    public static IReadOnlyList<TimeSpan> Steps { get; } =
    [
        TimeSpan.FromSeconds(10), TimeSpan.FromSeconds(30), TimeSpan.FromMinutes(1), TimeSpan.FromMinutes(5), TimeSpan.FromMinutes(15),
        TimeSpan.FromHours(1), TimeSpan.FromHours(6), TimeSpan.FromDays(1), TimeSpan.FromDays(7), TimeSpan.FromDays(30),
    ];

    public MonitorOptions Options => options;

    /// <summary>
    /// The trend of a version over a window (a name of <see cref="MonitorOptions.Windows"/>): the window's labelled
    /// predictions from the <see cref="LabelledCache"/>, cut into at most <paramref name="maxBuckets"/> buckets, and
    /// <see cref="CalibrationStatistics.ComputeSorted"/> over each bucket's rows.
    /// </summary>
    /// <exception cref="ArgumentException">The window is not configured.</exception>
    /// <exception cref="ArgumentOutOfRangeException">maxBuckets is below 1.</exception>
    public async Task<TrendView> TrendAsync(LoadedVersion version, string window, int maxBuckets, CancellationToken cancellationToken = default)
    {
        ArgumentOutOfRangeException.ThrowIfLessThan(maxBuckets, 1);
        var now = time.GetUtcNow();
        var (from, to) = Bounds(window, now);
        var last = now.UtcTicks - DateTimeOffset.UnixEpoch.UtcTicks;
        var step = Steps[^1];
        var start = now;
        var rows = await labelled.BucketsAsync(version.Model, version.Version, from, to, earliest =>
        {
            // The shortest step whose aligned buckets, from the one holding the first row to the one holding now, are few enough.
            var first = (earliest ?? now).UtcTicks - DateTimeOffset.UnixEpoch.UtcTicks;
            step = Steps.FirstOrDefault(s => (last / s.Ticks) - (first / s.Ticks) + 1 <= maxBuckets, Steps[^1]);
            start = new DateTimeOffset(DateTimeOffset.UnixEpoch.UtcTicks + (first / step.Ticks * step.Ticks), TimeSpan.Zero);
            return (start, step, (int)((now - start).Ticks / step.Ticks) + 1);
        }, cancellationToken).ConfigureAwait(false);
        var buckets = new List<TrendBucket>(rows.Count);
        for (var k = 0; k < rows.Count; k++)
        {
            var bucketFrom = start + (step * k);
            var c = CalibrationStatistics.ComputeSorted(rows[k].Probability, rows[k].Outcome, options.Level);
            buckets.Add(new TrendBucket(bucketFrom, bucketFrom + step, c.Labelled, c.Events, c.Expected, c.CalibrationIntercept, c.CalibrationSlope,
                c.Auc is { } auc && double.IsFinite(auc.Estimate) ? auc : null));
        }

        return new TrendView(window, from, to, step, options.Level, buckets);
    }

    /// <summary>
    /// The paths of a version's CUSUM charts over a window, from what the charts keep of their own path
    /// (<see cref="ChartPath"/>: the last outcomes exactly, each hour's lowest and highest value before them): no read
    /// of the store, and the same cost at any volume. At most <paramref name="maxPoints"/> points per chart, the chart's
    /// threshold and value now, and its kept signals within the window.
    /// </summary>
    /// <exception cref="ArgumentException">The window is not configured.</exception>
    /// <exception cref="ArgumentOutOfRangeException">maxPoints is below 8.</exception>
    public CusumPaths Cusum(LoadedVersion version, string window, int maxPoints)
    {
        ArgumentOutOfRangeException.ThrowIfLessThan(maxPoints, 8);
        var (from, to) = Bounds(window, time.GetUtcNow());
        var view = charts.View(version.Model, version.Version);
        if (view?.Up is not { } up || view.Down is not { } down || view.Through is not { } through
            || charts.Paths(version.Model, version.Version, from, to) is not var (upPoints, downPoints))
        {
            return new CusumPaths(window, from, to, null, null, view?.Outcomes ?? 0, view?.Through,
                view?.Waiting ?? "the charts have not taken in any outcome yet");
        }

        return new CusumPaths(window, from, to, Path(up, upPoints), Path(down, downPoints), view.Outcomes, through, null);

        CusumPath Path(CusumView chart, List<CusumPoint> points) => new(chart.OddsRatio, chart.Threshold, chart.Steps, chart.Value,
            Thin(points, maxPoints), [.. chart.Signals.Where(x => x.Time >= from && x.Time < to)]);
    }

    /// <summary>At most <paramref name="maxPoints"/> points: in each group of consecutive points its lowest and highest, in order; the last point always.</summary>
    private static List<CusumPoint> Thin(List<CusumPoint> points, int maxPoints)
    {
        if (points.Count <= maxPoints)
        {
            return points;
        }

        var group = (int)Math.Ceiling(points.Count / (maxPoints / 2.0 - 1));
        var thinned = new List<CusumPoint>(maxPoints);
        for (var start = 0; start < points.Count; start += group)
        {
            var end = Math.Min(points.Count, start + group);
            var low = start;
            var high = start;
            for (var i = start + 1; i < end; i++)
            {
                low = points[i].Value < points[low].Value ? i : low;
                high = points[i].Value > points[high].Value ? i : high;
            }

            thinned.Add(points[Math.Min(low, high)]);
            if (low != high)
            {
                thinned.Add(points[Math.Max(low, high)]);
            }
        }

        if (thinned[^1] != points[^1])
        {
            thinned.Add(points[^1]);
        }

        return thinned;
    }

    /// <summary>A window's range of prediction time, as the report takes it: [now − length, now + 1 minute).</summary>
    private (DateTimeOffset From, DateTimeOffset To) Bounds(string window, DateTimeOffset now)
    {
        var span = options.Windows.TryGetValue(window, out var s) ? s : throw new ArgumentException($"'{window}' is not a window", nameof(window));
        return (span is { } length ? now - length : DateTimeOffset.UnixEpoch, now.AddMinutes(1));
    }
}
