namespace Scorer.Store.Sqlite;

/// <summary>How values are written to and read from the SQLite columns (times as <see cref="StoreTime"/>'s microseconds since the Unix epoch).</summary>
internal static class StoredValues
{
    public static string ToText(Stage stage) => StoreRules.ToText(stage);

    public static Stage ToStage(string text) => StoreRules.ToStage(text);

    /// <summary>The Guid's 16 bytes in big-endian (RFC 9562) order, as a PostgreSQL uuid holds them.</summary>
    public static byte[] ToBytes(Guid id)
    {
        var bytes = new byte[16];
        id.TryWriteBytes(bytes, bigEndian: true, out _);
        return bytes;
    }

    public static Guid ToGuid(ReadOnlySpan<byte> bytes) => bytes.Length == 16
        ? new Guid(bytes, bigEndian: true)
        : throw new InvalidOperationException($"The database holds a prediction id of {bytes.Length} bytes; ids are 16.");
}
