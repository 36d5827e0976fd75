namespace Scorer.Statistics.Sequential;

/// <summary>
/// The outcome rate a chart's false-alarm budget is set from (<see cref="FalseAlarmBudget"/>): outcomes counted per hour
/// of prediction time over the last <see cref="Window"/>, in at most 169 counts whatever the volume. A rate taken from a
/// fixed number of recent outcomes cannot see a busy model: 2,000 outcomes that arrive within minutes count over the
/// shortest span of a day, so a model labelling 300,000 a day would be charted as if it labelled 2,000 (and alarm
/// about every two days instead of once a year).
/// </summary>
public sealed class OutcomeRate
{
    /// <summary>How far back the rate counts, in prediction time.</summary>
    public static readonly TimeSpan Window = TimeSpan.FromDays(7);

    private static readonly long WindowHours = Window.Ticks / TimeSpan.TicksPerHour;
    private readonly LinkedList<HourCount> _hours = new(); // oldest first; the last is the newest hour
    private long _total;
    private DateTimeOffset _last;

    /// <summary>Outcomes counted (within the window).</summary>
    public long Count => _total;

    /// <summary>
    /// Counts an outcome whose prediction was made at <paramref name="at"/>. The charts walk in prediction-time order;
    /// one that comes earlier than the newest hour counts in the newest hour.
    /// </summary>
    public void Add(DateTimeOffset at) => Add(at.UtcTicks / TimeSpan.TicksPerHour, 1, at);

    private void Add(long hour, long count, DateTimeOffset at)
    {
        if (_hours.Last is { } newest && hour <= newest.Value.Hour)
        {
            newest.Value = newest.Value with { Count = newest.Value.Count + count };
        }
        else
        {
            _hours.AddLast(new HourCount(hour, count));
            while (_hours.First!.Value.Hour < hour - WindowHours)
            {
                _total -= _hours.First.Value.Count;
                _hours.RemoveFirst();
            }
        }

        _total += count;
        if (at > _last)
        {
            _last = at;
        }
    }

    /// <summary>Outcomes per day: the count over the span from the oldest counted hour's start to the newest prediction time, at least a day.</summary>
    public double PerDay => _hours.First is { } oldest
        ? FalseAlarmBudget.RatePerDay(_total, new DateTimeOffset(oldest.Value.Hour * TimeSpan.TicksPerHour, TimeSpan.Zero), _last)
        : 0;

    /// <summary>The counts, oldest hour first, for saving.</summary>
    public OutcomeRateState Save() => new([.. _hours], _last);

    /// <summary>A rate that continues from a saved state.</summary>
    public static OutcomeRate Restore(OutcomeRateState state)
    {
        var rate = new OutcomeRate();
        foreach (var h in state.Hours)
        {
            rate.Add(h.Hour, h.Count, state.Last);
        }

        return rate;
    }
}

/// <summary>Outcomes counted in one hour of prediction time (hours since 0001-01-01 UTC).</summary>
public readonly record struct HourCount(long Hour, long Count);

/// <summary>What an <see cref="OutcomeRate"/> saves.</summary>
public sealed record OutcomeRateState(HourCount[] Hours, DateTimeOffset Last);
