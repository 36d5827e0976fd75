namespace Scorer.Monitor.Reporting;

/// <summary>
/// The path a CUSUM chart took, kept by the chart itself so that drawing it never reads the version's history: its last
/// <see cref="MonitorOptions.CusumPathTail"/> points exactly, and before them, per hour of prediction time over the last
/// <see cref="MonitorOptions.CusumPathDays"/>, the hour's lowest and highest S (each with its outcome's position). Its
/// size is bounded by the two settings whatever the volume: about 24 × days hours of two points, plus the tail.
/// </summary>
internal sealed class ChartPath(int tail, int days)
{
    private readonly Queue<CusumPoint> _tail = new();
    private readonly LinkedList<HourExtremes> _hours = new(); // oldest first

    /// <summary>Takes in the chart's S after one outcome (before any reset), at its 1-based position and prediction time.</summary>
    public void Add(long index, DateTimeOffset at, double value)
    {
        var point = new CusumPoint(index, at, value);
        _tail.Enqueue(point);
        while (_tail.Count > tail)
        {
            _tail.Dequeue();
        }

        var hour = at.UtcTicks / TimeSpan.TicksPerHour;
        if (_hours.Last is { } newest && hour <= newest.Value.Hour)
        {
            // The charts walk in prediction-time order; a row at the same time as the cursor belongs to the newest hour.
            var h = newest.Value;
            if (value < h.Low)
            {
                h = h with { LowIndex = index, Low = value };
            }

            if (value > h.High)
            {
                h = h with { HighIndex = index, High = value };
            }

            newest.Value = h;
        }
        else
        {
            _hours.AddLast(new HourExtremes(hour, index, value, index, value));
            var oldest = hour - (days * 24L);
            while (_hours.First!.Value.Hour < oldest)
            {
                _hours.RemoveFirst();
            }
        }
    }

    /// <summary>
    /// The points with prediction times in [from, to), in order of position: the kept hours' extremes up to the tail,
    /// then the tail's points. Hours older than <see cref="MonitorOptions.CusumPathDays"/> are not there.
    /// </summary>
    public List<CusumPoint> Points(DateTimeOffset from, DateTimeOffset to)
    {
        var tailStart = _tail.Count > 0 ? _tail.Peek().Index : long.MaxValue;
        var points = new List<CusumPoint>();
        foreach (var h in _hours)
        {
            var start = new DateTimeOffset(h.Hour * TimeSpan.TicksPerHour, TimeSpan.Zero);
            if (start < from || start >= to)
            {
                continue; // an hour counts where it starts
            }

            var low = new CusumPoint(h.LowIndex, start, h.Low);
            var high = new CusumPoint(h.HighIndex, start, h.High);
            foreach (var p in h.LowIndex <= h.HighIndex ? [low, high] : new[] { high, low })
            {
                if (p.Index < tailStart && (points.Count == 0 || points[^1].Index < p.Index))
                {
                    points.Add(p);
                }
            }
        }

        foreach (var p in _tail)
        {
            if (p.Time >= from && p.Time < to)
            {
                points.Add(p);
            }
        }

        return points;
    }

    public ChartPathState Save() => new([.. _tail], [.. _hours]);

    public static ChartPath Restore(int tail, int days, ChartPathState? state)
    {
        var path = new ChartPath(tail, days);
        if (state is not null)
        {
            foreach (var h in state.Hours)
            {
                path._hours.AddLast(h);
            }

            foreach (var p in state.Tail.Skip(Math.Max(0, state.Tail.Length - tail)))
            {
                path._tail.Enqueue(p);
            }
        }

        return path;
    }
}

/// <summary>One hour of a chart's path (hours since 0001-01-01 UTC): its lowest and its highest S, each with its outcome's position.</summary>
internal readonly record struct HourExtremes(long Hour, long LowIndex, double Low, long HighIndex, double High);

/// <summary>What a <see cref="ChartPath"/> saves.</summary>
internal sealed record ChartPathState(CusumPoint[] Tail, HourExtremes[] Hours);
