namespace Scorer.Store;

/// <summary>
/// How every driver keeps time: instants in UTC, to the microsecond, rounded down (towards the past); counts by whole
/// minutes and hours since the Unix epoch.
/// </summary>
public static class StoreTime
{
    /// <summary>Ticks (100 ns) in a microsecond.</summary>
    public const long TicksPerMicrosecond = TimeSpan.TicksPerMillisecond / 1000;

    /// <summary>Microseconds in a minute: the bucket of the per-minute prediction counts.</summary>
    public const long MicrosecondsPerMinute = 60_000_000;

    /// <summary>Microseconds in an hour: the bucket of the drift counts.</summary>
    public const long MicrosecondsPerHour = 3_600_000_000;

    /// <summary>Microseconds since the Unix epoch, UTC, rounded down (towards the past).</summary>
    public static long ToUnixMicroseconds(DateTimeOffset time)
    {
        var ticks = time.UtcTicks - DateTimeOffset.UnixEpoch.UtcTicks;
        return ticks >= 0 ? ticks / TicksPerMicrosecond : ((ticks + 1) / TicksPerMicrosecond) - 1;
    }

    /// <summary>The instant <paramref name="microseconds"/> after the Unix epoch, with offset zero.</summary>
    public static DateTimeOffset FromUnixMicroseconds(long microseconds) =>
        new(DateTimeOffset.UnixEpoch.UtcTicks + (microseconds * TicksPerMicrosecond), TimeSpan.Zero);

    /// <summary>
    /// The instant as the stores keep it: in UTC (offset zero), rounded down to the microsecond. (Ticks since year 1 are
    /// never negative and the Unix epoch is a whole microsecond, so this is the rounding of <see cref="ToUnixMicroseconds"/>.)
    /// </summary>
    public static DateTimeOffset ToStorePrecision(DateTimeOffset time)
    {
        var ticks = time.UtcTicks;
        return new DateTimeOffset(ticks - (ticks % TicksPerMicrosecond), TimeSpan.Zero);
    }

    /// <summary>The first whole <paramref name="unit"/> (in microseconds) at or after <paramref name="time"/>, in units since the epoch: a range bound.</summary>
    public static long CeilingUnits(DateTimeOffset time, long unit)
    {
        var us = ToUnixMicroseconds(time);
        var n = us / unit;
        return n * unit == us ? n : n + 1;
    }

    /// <summary>The minute bucket of a scoring time (microseconds since the epoch / 60,000,000).</summary>
    public static long Minute(DateTimeOffset time) => ToUnixMicroseconds(time) / MicrosecondsPerMinute;

    /// <summary>The hour bucket of a drift count (microseconds since the epoch / 3,600,000,000).</summary>
    public static long Hour(DateTimeOffset time) => ToUnixMicroseconds(time) / MicrosecondsPerHour;

    /// <summary><paramref name="time"/> less <paramref name="span"/>, or the earliest instant when that would fall before it.</summary>
    public static DateTimeOffset SafeSubtract(DateTimeOffset time, TimeSpan span) =>
        time.UtcTicks - DateTimeOffset.MinValue.UtcTicks < span.Ticks ? DateTimeOffset.MinValue : time - span;
}
