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

    /// <summary>The page cache of the write connection unless set: 64 MiB.</summary>
    public const long DefaultWriteCacheBytes = 64L << 20;

    /// <summary>The page cache of each read connection unless set: 8 MiB.</summary>
    public const long DefaultReadCacheBytes = 8L << 20;

    /// <summary>
    /// The page cache of the connection that writes (one at a time, under the store's write lock), in bytes (64 MiB by
    /// default): outcomes by id or key, arriving in random order, read index pages all over the file, and each page
    /// found in the cache saves a read. At least 1 MiB.
    /// </summary>
    public long WriteCacheBytes { get; init; } = DefaultWriteCacheBytes;

    /// <summary>
    /// The page cache of each connection that reads (reports, the change feed, the summaries; as many as run at once),
    /// in bytes (8 MiB by default). The store's memory is about <see cref="WriteCacheBytes"/> plus this times the reads
    /// running at once. At least 1 MiB.
    /// </summary>
    public long ReadCacheBytes { get; init; } = DefaultReadCacheBytes;
}
