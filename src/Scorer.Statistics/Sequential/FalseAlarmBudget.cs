namespace Scorer.Statistics.Sequential;

/// <summary>
/// A chart's false-alarm budget in time: the in-control run length (outcomes per false alarm) that gives one false
/// alarm per <c>days</c> at the observed outcome rate, never below a floor in outcomes. A run length set per outcome
/// alone makes a busy model alarm often (at 100,000 outcomes per alarm, a model labelling a million a day alarms ten
/// times a day); one set in time keeps the alarms as rare in days whatever the volume.
/// </summary>
public static class FalseAlarmBudget
{
    /// <summary>The shortest span the rate is measured over: outcomes that arrive within a moment say little about a day.</summary>
    public static readonly TimeSpan MinRateSpan = TimeSpan.FromDays(1);

    /// <summary>Outcomes per day, from <paramref name="count"/> outcomes whose prediction times span first to last (at least <see cref="MinRateSpan"/>).</summary>
    public static double RatePerDay(long count, DateTimeOffset first, DateTimeOffset last)
    {
        var span = last - first;
        return count / (span > MinRateSpan ? span : MinRateSpan).TotalDays;
    }

    /// <summary>
    /// The run length to set the thresholds for: rate × days, at least <paramref name="floor"/>; the floor alone when
    /// <paramref name="days"/> is 0 (the budget in time is off).
    /// </summary>
    public static double RunLength(double floor, double days, double ratePerDay)
    {
        ArgumentOutOfRangeException.ThrowIfLessThan(floor, 10.0);
        ArgumentOutOfRangeException.ThrowIfNegative(days);
        ArgumentOutOfRangeException.ThrowIfNegative(ratePerDay);
        return Math.Max(floor, ratePerDay * days);
    }

    /// <summary>Whether a new target differs enough from the one the thresholds were set for to set them again (by a quarter either way).</summary>
    public static bool Moved(double current, double target) => target > current * 1.25 || target < current / 1.25;
}
