namespace Scorer.Store;

/// <summary>
/// Leases (work that runs in one process among all that share the store) and the state the lease's holder saves.
/// </summary>
public interface ILeaseStore
{
    /// <summary>
    /// Tries to take, or confirms this instance still holds, the named lease: the right to run work that must run in one
    /// process only among all that share the store (the monitor's CUSUM charts). True while this instance holds it. A
    /// lease is held until <see cref="ReleaseLeaseAsync"/>, disposal, or the holder's death (then another instance's next
    /// try takes it; the driver says how soon). At most one instance holds a lease at a time, across every process that
    /// shares the store (PostgreSQL: a session advisory lock; SQLite: a row of the file renewed by each try, taken over
    /// once it has not been renewed for the store's lease duration).
    /// </summary>
    Task<bool> TryHoldLeaseAsync(string name, CancellationToken cancellationToken = default);

    /// <summary>Gives the named lease up, if this instance holds it.</summary>
    Task ReleaseLeaseAsync(string name, CancellationToken cancellationToken = default);

    /// <summary>
    /// Saves the state of a version's charts (an opaque document), only while this instance holds the lease
    /// <paramref name="lease"/>: a holder that has lost it gets <see cref="LeaseLostException"/> and nothing is written,
    /// so a new holder's state is never overwritten by an old one.
    /// </summary>
    Task SaveChartStateAsync(string model, string version, string state, string lease, CancellationToken cancellationToken = default);

    /// <summary>The last saved state of a version's charts, or null.</summary>
    Task<string?> GetChartStateAsync(string model, string version, CancellationToken cancellationToken = default);
}
