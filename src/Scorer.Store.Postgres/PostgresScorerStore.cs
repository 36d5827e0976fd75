using System.Globalization;
using System.Text.RegularExpressions;
using Npgsql;
using NpgsqlTypes;

namespace Scorer.Store.Postgres;

/// <summary>
/// The store in a PostgreSQL database (15 or later), through one <see cref="NpgsqlDataSource"/> (a connection pool).
/// </summary>
/// <remarks>
/// <para>
/// Every call takes its own pooled connection, so calls run side by side, in this process and in other replicas on the
/// same database. Transactions are READ COMMITTED. Calls that read, decide and write take transaction-scoped advisory
/// locks (keys below, within the store's schema): migrations one fixed key; stage changes one per model (and row locks
/// on the versions they change); writers of outcomes one per model (reports and the implicit-negative sweep; the
/// change feed's reads wait on it); the prediction log one, shared by every write and taken exclusively, for a
/// moment, by the sweep. So concurrent writers in several processes give the results the SQLite driver gives with
/// one writer at a time, and readers of the change feed and the sweep never pass a write still in flight.
/// </para>
/// <para>
/// Times are stored as timestamptz: they come back to the microsecond (rounded down, towards the past), with offset
/// zero. Doubles are float8, written and read in binary, and come back bit for bit.
/// </para>
/// <para>
/// Behaviour beyond the interface, which the contract tests hold every store to:
/// a stage change naming an unknown (model, version), or whose <see cref="StageChange.From"/> is given and is not the
/// stored stage, throws <see cref="InvalidOperationException"/> naming it and changes nothing; a change whose From is
/// null is applied from whatever the stored stage is, and the history records that stage as its From. A prediction
/// with a NaN or infinite eta or probability throws <see cref="ArgumentException"/> naming the field; a prediction id
/// repeated in a batch or already stored throws <see cref="InvalidOperationException"/> naming the id. Either way the
/// batch writes nothing. History comes in the order the changes were made.
/// </para>
/// <para>
/// One difference from the SQLite driver, which PostgreSQL imposes: text cannot hold the character U+0000, so a
/// prediction holding it in Model, Version, Key or FeaturesJson throws <see cref="ArgumentException"/> naming the field
/// (and the batch writes nothing), and a report by a key holding it is unknown.
/// </para>
/// </remarks>
public sealed partial class PostgresScorerStore : IScorerStore, IRetentionStore
{
    /// <summary>Advisory lock held while migrating: replicas starting together migrate one after the other.</summary>
    internal const long MigrationLockKey = 0x5C0_5E57_0001;

    /// <summary>
    /// Advisory lock on the prediction log, keyed (this, hashtext(current_schema())): every prediction write holds it
    /// shared; the implicit-negative sweep takes it exclusively for a moment, so that it reads a log_seq below which
    /// every row is committed (or rolled back).
    /// </summary>
    internal const int LogLockClass = 0x5C05E57;

    /// <summary>Stage changes of one model take turns: key (this, hashtext(schema.model)).</summary>
    private const int StageLockClass = 0x5C05E58;

    /// <summary>
    /// Writers of one model's outcomes (reports and the implicit-negative sweep) take turns: key (this,
    /// hashtext(schema.model)). Each reads the recorded outcomes it will change, decides, and writes, as the SQLite
    /// driver's one writer at a time does, without locking outcome rows one by one.
    /// </summary>
    internal const int OutcomeLockClass = 0x5C05E59;

    /// <summary>A row's log_seq is its batch's number times this, plus its place in the batch.</summary>
    internal const long RowsPerBatchNumber = 1L << 24;

    /// <summary>The SQL of the log's advisory lock key.</summary>
    internal static readonly string LogLockKey = string.Create(CultureInfo.InvariantCulture, $"{LogLockClass}, hashtext(current_schema())");

    private const string StageColumns = "model, version, file_sha256, loaded_at, stage";
    private const string PredictionColumns = "id, model, version, stage, scored_at, \"key\", eta, probability, features, live_id";

    /// <summary>How often a batch of outcomes is tried in all when it meets a deadlock or an outcome inserted from outside the store.</summary>
    private const int OutcomeAttempts = 8;

    private readonly NpgsqlDataSource _dataSource;
    private readonly string _connectionString;
    private readonly TimeProvider _clock;
    private readonly string? _schema;
    private volatile bool _disposed;

    private PostgresScorerStore(NpgsqlConnectionStringBuilder builder, PostgresStoreOptions options, TimeProvider clock)
    {
        if (options.Schema is { } schema)
        {
            if (!SchemaName().IsMatch(schema))
            {
                throw new ArgumentException(
                    $"Schema '{schema}' is not a plain lower-case identifier (a letter or _, then letters, digits or _, at most 63).", nameof(options));
            }

            builder.SearchPath = schema;
            _schema = schema;
        }

        RetentionRules.Check(options.PredictionRetention, options.OutcomeRetention, options.PruneInterval, nameof(options));

        // Statements the store runs over and over are prepared on each connection (Npgsql's automatic preparation),
        // unless the connection string says otherwise: the outcome statements cost about 40% less server CPU prepared
        // than parsed and planned on every call (measured with bench/Scorer.Bench --postgres).
        if (builder.MaxAutoPrepare == 0)
        {
            builder.MaxAutoPrepare = 64;
            builder.AutoPrepareMinUsages = 2;
        }

        Options = options;
        _connectionString = builder.ConnectionString;
        _dataSource = NpgsqlDataSource.Create(builder);
        _clock = clock;
    }

    /// <summary>The options the store was opened with.</summary>
    public PostgresStoreOptions Options { get; }

    /// <summary>Opens the database an Npgsql connection string names, with default options.</summary>
    /// <param name="connectionString">
    /// An Npgsql connection string (Host, Port, Username, Database, …). Unless it sets Max Auto Prepare, the store
    /// turns Npgsql's automatic preparation on (64 statements per connection, prepared at their second use).
    /// </param>
    /// <param name="clock">The clock that stamps applied migrations; the system clock by default.</param>
    public static PostgresScorerStore ForConnectionString(string connectionString, TimeProvider? clock = null) =>
        ForConnectionString(connectionString, new PostgresStoreOptions(), clock);

    /// <summary>Opens the database an Npgsql connection string names, with the given options (schema, retention).</summary>
    /// <param name="connectionString">An Npgsql connection string (Host, Port, Username, Database, …).</param>
    /// <param name="options">The schema to use and how long to keep predictions.</param>
    /// <param name="clock">The clock that stamps applied migrations; the system clock by default.</param>
    public static PostgresScorerStore ForConnectionString(string connectionString, PostgresStoreOptions options, TimeProvider? clock = null)
    {
        ArgumentException.ThrowIfNullOrWhiteSpace(connectionString);
        ArgumentNullException.ThrowIfNull(options);
        NpgsqlConnectionStringBuilder builder;
        try
        {
            builder = new NpgsqlConnectionStringBuilder(connectionString);
        }
        catch (ArgumentException ex)
        {
            throw new ArgumentException($"The connection string is not one Npgsql reads: {ex.Message}", nameof(connectionString), ex);
        }

        return new PostgresScorerStore(builder, options, clock ?? TimeProvider.System);
    }

    /// <summary>The highest migration this build knows; the schema version after <see cref="MigrateAsync"/>.</summary>
    public static int LatestSchemaVersion => Migration.All[^1].Version;

    /// <inheritdoc />
    /// <remarks>
    /// In one transaction that first takes an advisory lock with a fixed key (pg_advisory_xact_lock): a second replica
    /// starting at the same moment waits there, then finds every migration applied. Creates the schema when the store
    /// has one and it is missing.
    /// </remarks>
    public async Task MigrateAsync(CancellationToken cancellationToken = default)
    {
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        await using var transaction = await connection.BeginTransactionAsync(cancellationToken).ConfigureAwait(false);
        await ExecuteAsync(connection, transaction, $"SELECT pg_advisory_xact_lock({MigrationLockKey})", cancellationToken).ConfigureAwait(false);
        if (_schema is not null)
        {
            await ExecuteAsync(connection, transaction, $"CREATE SCHEMA IF NOT EXISTS {_schema}", cancellationToken).ConfigureAwait(false);
        }

        await ExecuteAsync(connection, transaction,
            "CREATE TABLE IF NOT EXISTS schema_migrations (version integer NOT NULL PRIMARY KEY, applied_at timestamptz NOT NULL)", cancellationToken)
            .ConfigureAwait(false);

        var applied = new HashSet<int>();
        await using (var select = Command(connection, transaction, "SELECT version FROM schema_migrations"))
        await using (var reader = await select.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false))
        {
            while (await reader.ReadAsync(cancellationToken).ConfigureAwait(false))
            {
                applied.Add(reader.GetInt32(0));
            }
        }

        var newest = applied.Count == 0 ? 0 : applied.Max();
        if (newest > LatestSchemaVersion)
        {
            throw new InvalidOperationException(
                $"The database is at schema version {newest}, newer than this build knows ({LatestSchemaVersion}); run a newer build.");
        }

        foreach (var migration in Migration.All)
        {
            cancellationToken.ThrowIfCancellationRequested();
            if (applied.Contains(migration.Version))
            {
                continue;
            }

            await ExecuteAsync(connection, transaction, migration.Sql, cancellationToken).ConfigureAwait(false);
            await using var record = Command(connection, transaction, "INSERT INTO schema_migrations (version, applied_at) VALUES ($1, $2)");
            record.Parameters.Add(new NpgsqlParameter<int> { TypedValue = migration.Version });
            record.Parameters.Add(Timestamp(_clock.GetUtcNow()));
            await record.ExecuteNonQueryAsync(cancellationToken).ConfigureAwait(false);
        }

        await transaction.CommitAsync(cancellationToken).ConfigureAwait(false);
    }

    /// <summary>Closes the store's pooled connections. Calls after this throw <see cref="ObjectDisposedException"/>.</summary>
    public async ValueTask DisposeAsync()
    {
        if (!_disposed)
        {
            _disposed = true;
            await ReleaseAllLeasesAsync().ConfigureAwait(false);
            await _dataSource.DisposeAsync().ConfigureAwait(false);
        }
    }

    /// <summary>A pooled connection to the store's database, with its search path; for the tests' look at the tables.</summary>
    internal async Task<NpgsqlConnection> OpenAsync(CancellationToken cancellationToken)
    {
        ObjectDisposedException.ThrowIf(_disposed, this);
        return await _dataSource.OpenConnectionAsync(cancellationToken).ConfigureAwait(false);
    }

    private static NpgsqlCommand Command(NpgsqlConnection connection, NpgsqlTransaction? transaction, string sql) => new(sql, connection, transaction);

    private static async Task ExecuteAsync(NpgsqlConnection connection, NpgsqlTransaction? transaction, string sql, CancellationToken cancellationToken)
    {
        await using var command = Command(connection, transaction, sql);
        await command.ExecuteNonQueryAsync(cancellationToken).ConfigureAwait(false);
    }

    private static NpgsqlParameter<string> Text(string value) => new() { TypedValue = value, NpgsqlDbType = NpgsqlDbType.Text };

    private static NpgsqlParameter<string[]> TextArray(string[] values) => new() { TypedValue = values, NpgsqlDbType = NpgsqlDbType.Array | NpgsqlDbType.Text };

    private static NpgsqlParameter<long> Bigint(long value) => new() { TypedValue = value, NpgsqlDbType = NpgsqlDbType.Bigint };

    private static NpgsqlParameter<DateTime> Timestamp(DateTimeOffset value) =>
        new() { TypedValue = PostgresValues.ToTimestamp(value), NpgsqlDbType = NpgsqlDbType.TimestampTz };

    [GeneratedRegex("^[a-z_][a-z0-9_]{0,62}$")]
    private static partial Regex SchemaName();
}
