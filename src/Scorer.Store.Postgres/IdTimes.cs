using System.Buffers.Binary;

namespace Scorer.Store.Postgres;

/// <summary>
/// The time a prediction id carries, so that a lookup by id reads only the partitions that can hold it (migration
/// 0007): a version-7 id (<see cref="PredictionIds"/>) holds the Unix milliseconds of when it was made. The service
/// makes a live prediction's id from its scoring time, and a shadow's id when the shadow is scored, a moment after
/// the live row's time, which the shadow keeps. So a row's scored_at lies at most <see cref="Lag"/> before its id's
/// millisecond, or within that millisecond; rows outside this (ids of another version, ids made from another time)
/// are listed in the table prediction_times with their scored_at when they are written.
/// </summary>
internal static class IdTimes
{
    /// <summary>How long before its id's time a row's scored_at may be and still be found from the id alone.</summary>
    public static readonly TimeSpan Lag = TimeSpan.FromHours(1);

    /// <summary>The Unix milliseconds a version-7 id carries, or null for an id of another version.</summary>
    public static long? Milliseconds(Guid id)
    {
        if (id.Version != 7)
        {
            return null;
        }

        Span<byte> bytes = stackalloc byte[16];
        id.TryWriteBytes(bytes, bigEndian: true, out _);
        return (long)(BinaryPrimitives.ReadUInt64BigEndian(bytes) >> 16);
    }

    /// <summary>
    /// The span of scored_at [From, To) in which a row with this id is looked for, or nulls when the id carries no
    /// time (then only prediction_times can find it).
    /// </summary>
    public static (DateTime? From, DateTime? To) Window(Guid id) =>
        Milliseconds(id) is { } ms
            ? (DateTime.UnixEpoch.AddMilliseconds(ms) - Lag, DateTime.UnixEpoch.AddMilliseconds(ms + 1))
            : (null, null);

    /// <summary>Whether a row with this id and time is found from its id alone (else it goes to prediction_times).</summary>
    public static bool Carries(Guid id, DateTimeOffset scoredAt)
    {
        if (Milliseconds(id) is not { } ms)
        {
            return false;
        }

        var lead = ms - scoredAt.ToUnixTimeMilliseconds();
        return lead >= 0 && lead <= (long)Lag.TotalMilliseconds;
    }
}
