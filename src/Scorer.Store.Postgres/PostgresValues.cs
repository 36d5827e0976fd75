namespace Scorer.Store.Postgres;

/// <summary>How values are written to and read from the PostgreSQL columns (times by <see cref="StoreTime"/>'s rules).</summary>
internal static class PostgresValues
{
    /// <summary>
    /// The instant as a UTC <see cref="DateTime"/> rounded down (towards the past) to the microsecond, as timestamptz
    /// keeps it (<see cref="StoreTime.ToStorePrecision"/>); Npgsql then writes it exactly.
    /// </summary>
    public static DateTime ToTimestamp(DateTimeOffset time) => new(StoreTime.ToStorePrecision(time).UtcTicks, DateTimeKind.Utc);

    public static DateTime? ToTimestamp(DateTimeOffset? time) => time is { } t ? ToTimestamp(t) : null;

    /// <summary>A timestamptz as read by Npgsql (a UTC <see cref="DateTime"/>) as an instant with offset zero.</summary>
    public static DateTimeOffset FromTimestamp(DateTime time) => new(DateTime.SpecifyKind(time, DateTimeKind.Utc).Ticks, TimeSpan.Zero);

    public static string ToText(Stage stage) => StoreRules.ToText(stage);

    public static Stage ToStage(string text) => StoreRules.ToStage(text);
}
