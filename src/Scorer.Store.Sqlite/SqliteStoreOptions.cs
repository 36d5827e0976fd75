namespace Scorer.Store.Sqlite;

/// <summary>Settings of the SQLite store beyond its file.</summary>
public sealed record SqliteStoreOptions
{
    /// <summary>
    /// The most the database file may grow to, in bytes (null: as far as the disk allows). A write that would take it
    /// beyond is refused as on a full disk (<see cref="StoreFullException"/>), so the store cannot fill a disk it shares;
    /// space freed inside the file (rows deleted) is used again. At least <see cref="SqliteScorerStore.MinimumMaxSizeBytes"/>.
    /// </summary>
    public long? MaxSizeBytes { get; init; }
}
