namespace Scorer.Store;

/// <summary>
/// A store whose driver holds memory inside this process (SQLite's page caches and prepared statements), so that the
/// metrics can show it beside the managed heap; a store on a server of its own (PostgreSQL) holds its caches there.
/// </summary>
public interface IStoreMemorySignal
{
    /// <summary>Bytes the driver holds now (SQLite: <c>sqlite3_memory_used</c>, over every connection of the process).</summary>
    long HeldBytes { get; }
}
