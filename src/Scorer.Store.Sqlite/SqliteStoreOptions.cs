namespace Scorer.Store.Sqlite;

/// <summary>Settings of the SQLite store beyond its file.</summary>
public sealed record SqliteStoreOptions
{
    /// <summary>The lease duration unless set: 30 s, thirty of the monitor's default rounds (each renews the charts' lease).</summary>
    public static readonly TimeSpan DefaultLeaseDuration = TimeSpan.FromSeconds(30);

    /// <summary>
    /// The most the database file may grow to, in bytes (null: as far as the disk allows). A write that would take it
    /// beyond is refused as on a full disk (<see cref="StoreFullException"/>), so the store cannot fill a disk it shares;
    /// space freed inside the file (rows deleted) is used again. At least <see cref="SqliteScorerStore.MinimumMaxSizeBytes"/>.
    /// </summary>
    public long? MaxSizeBytes { get; init; }

    /// <summary>
    /// How long a lease stays with its holder after the holder last renewed it (each <see cref="SqliteScorerStore.TryHoldLeaseAsync"/>
    /// and each save under it renews it), on the store's clock: once that has passed without a renewal, another store
    /// instance on the same file may take the lease over. So a holder that dies without releasing its leases holds
    /// them up for at most this long. Must be positive, and longer than the time between a holder's renewals (the
    /// monitor renews once a round, <c>Scorer:Monitor:PollInterval</c>), or the lease passes between live instances.
    /// </summary>
    public TimeSpan LeaseDuration { get; init; } = DefaultLeaseDuration;

    /// <summary>The rows a retention batch deletes at most unless set: 5,000 (see <see cref="PruneBatchSize"/>).</summary>
    public const int DefaultPruneBatchSize = 5_000;

    /// <summary>
    /// How long logged predictions are kept before <see cref="SqliteScorerStore.PruneAsync"/> may delete them (see
    /// there for which ones it deletes); null (the default) keeps them forever, and pruning deletes none.
    /// </summary>
    public TimeSpan? PredictionRetention { get; init; }

    /// <summary>
    /// How long outcomes and outcome conflicts are kept (by the prediction's time, and the report's time for a
    /// conflict); null (the default) keeps them forever. When set, at least <see cref="PredictionRetention"/>.
    /// </summary>
    public TimeSpan? OutcomeRetention { get; init; }

    /// <summary>
    /// How often the store's hosted service (registered by <c>AddSqliteStore</c>) applies the retention, on the host's
    /// clock: once at start, then every interval (an hour by default). Only with a <see cref="PredictionRetention"/>.
    /// </summary>
    public TimeSpan PruneInterval { get; init; } = RetentionRules.DefaultPruneInterval;

    /// <summary>
    /// The most rows one retention transaction deletes (5,000 by default): each batch is a short write transaction of
    /// its own, so the prediction log's writer (and every other writer) waits at most one batch.
    /// </summary>
    public int PruneBatchSize { get; init; } = DefaultPruneBatchSize;
}
