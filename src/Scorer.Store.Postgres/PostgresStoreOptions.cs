namespace Scorer.Store.Postgres;

/// <summary>Settings of the PostgreSQL store beyond its connection string.</summary>
public sealed record PostgresStoreOptions
{
    /// <summary>
    /// The schema that holds the store's tables, created by <see cref="PostgresScorerStore.MigrateAsync"/> when missing;
    /// null (the default) uses the first schema of the connection's search path (normally <c>public</c>). A lower-case
    /// identifier: a letter or underscore, then letters, digits or underscores, at most 63 in all. Several stores (or
    /// test runs) can share one database, each in a schema of its own.
    /// </summary>
    public string? Schema { get; init; }

    /// <summary>
    /// How long logged predictions are kept before <see cref="PostgresScorerStore.PruneAsync"/> may delete them (see
    /// there for which ones it deletes); null (the default) keeps them forever, and pruning deletes nothing.
    /// </summary>
    public TimeSpan? PredictionRetention { get; init; }

    /// <summary>
    /// How often the store's hosted service (registered by <c>AddPostgresStore</c>) applies the retention, on the
    /// host's clock: once at start, then every interval (an hour by default). Only with a <see cref="PredictionRetention"/>.
    /// </summary>
    public TimeSpan PruneInterval { get; init; } = RetentionRules.DefaultPruneInterval;

    /// <summary>
    /// How long outcomes and outcome conflicts are kept (by the prediction's time, and the report's time for a
    /// conflict); null (the default) keeps them forever. When set, at least <see cref="PredictionRetention"/>.
    /// </summary>
    public TimeSpan? OutcomeRetention { get; init; }
}
