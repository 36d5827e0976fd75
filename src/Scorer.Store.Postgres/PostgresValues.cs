namespace Scorer.Store.Postgres;

/// <summary>How values are written to and read from the PostgreSQL columns.</summary>
internal static class PostgresValues
{
    private const long TicksPerMicrosecond = TimeSpan.TicksPerMillisecond / 1000;

    public const long MicrosecondsPerMinute = 60_000_000;
    public const long MicrosecondsPerHour = 3_600_000_000;

    /// <summary>
    /// The instant as a UTC <see cref="DateTime"/> rounded down (towards the past) to the microsecond, as timestamptz
    /// keeps it; Npgsql then writes it exactly. (Ticks since year 1 are never negative, and the Unix epoch is a whole
    /// microsecond, so this is the same rounding as the SQLite driver's.)
    /// </summary>
    public static DateTime ToTimestamp(DateTimeOffset time)
    {
        var ticks = time.UtcTicks;
        return new DateTime(ticks - (ticks % TicksPerMicrosecond), DateTimeKind.Utc);
    }

    public static DateTime? ToTimestamp(DateTimeOffset? time) => time is { } t ? ToTimestamp(t) : null;

    /// <summary>A timestamptz as read by Npgsql (a UTC <see cref="DateTime"/>) as an instant with offset zero.</summary>
    public static DateTimeOffset FromTimestamp(DateTime time) => new(DateTime.SpecifyKind(time, DateTimeKind.Utc).Ticks, TimeSpan.Zero);

    /// <summary>Microseconds since the Unix epoch, UTC, rounded down (towards the past), as the SQLite driver stores times.</summary>
    public static long ToUnixMicroseconds(DateTimeOffset time)
    {
        var ticks = time.UtcTicks - DateTimeOffset.UnixEpoch.UtcTicks;
        return ticks >= 0 ? ticks / TicksPerMicrosecond : ((ticks + 1) / TicksPerMicrosecond) - 1;
    }

    /// <summary>The minute bucket of a scoring time, as the SQLite driver numbers it (microseconds / 60,000,000).</summary>
    public static long Minute(DateTimeOffset time) => ToUnixMicroseconds(time) / MicrosecondsPerMinute;

    /// <summary>The hour bucket of a drift count, as the SQLite driver numbers it (microseconds / 3,600,000,000).</summary>
    public static long Hour(DateTimeOffset time) => ToUnixMicroseconds(time) / MicrosecondsPerHour;

    /// <summary>The first whole unit at or after <paramref name="time"/>, in units since the epoch (a range bound).</summary>
    public static long CeilingUnits(DateTimeOffset time, long unit)
    {
        var us = ToUnixMicroseconds(time);
        var n = us / unit;
        return n * unit == us ? n : n + 1;
    }

    public static string ToText(Stage stage) => StoreRules.ToText(stage);

    public static Stage ToStage(string text) => StoreRules.ToStage(text);
}
