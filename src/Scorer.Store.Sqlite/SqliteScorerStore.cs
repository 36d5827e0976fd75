using System.Globalization;
using Microsoft.Data.Sqlite;

namespace Scorer.Store.Sqlite;

/// <summary>
/// The store in one SQLite file: WAL journal, <c>synchronous=NORMAL</c>, foreign keys on, a busy timeout.
/// </summary>
/// <remarks>
/// <para>
/// Every call opens its own connection from the provider's pool, so reads run side by side. Writes in one store
/// instance take turns behind a lock and each runs in a <c>BEGIN IMMEDIATE</c> transaction, so writers in other
/// processes wait on the busy timeout rather than fail half-way.
/// </para>
/// <para>
/// Times are stored as integer microseconds since the Unix epoch, UTC: they come back to the microsecond (rounded
/// down, towards the past), with offset zero. Doubles are stored as IEEE 754 binary64 and come back bit for bit.
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
/// Leases are rows of the file with their holder and the end of the hold (<see cref="TryHoldLeaseAsync"/>), so at most
/// one instance among all the processes on the file holds one. Outcome reports are checked and applied by the rules
/// every driver shares (<see cref="OutcomeRules"/>). The class is split by concern: <c>.Stages</c>, <c>.Predictions</c>,
/// <c>.Outcomes</c>, <c>.Labelled</c>, <c>.Drift</c>, <c>.Leases</c>, <c>.Retention</c>; this file holds opening, migrating, writing and closing.
/// </para>
/// </remarks>
public sealed partial class SqliteScorerStore : IScorerStore, IStoreSpaceSignal, IStoreMemorySignal, IRetentionStore
{
    private const string StageColumns = "model, version, file_sha256, loaded_at, stage";
    /// <summary>SQLite's result code for a write that found no room (disk full, or max_page_count reached).</summary>
    private const int SqliteFull = 13;

    private const string PredictionColumns = "id, model, version, stage, scored_at, \"key\", eta, probability, features, live_id";

    private readonly string _connectionString;
    private readonly string _writeConnectionString;
    private readonly string _readPragmas;
    private readonly string _writePragmas;
    private readonly TimeProvider _clock;
    private readonly SemaphoreSlim _writeLock = new(1, 1);
    private readonly long _leaseMicroseconds;
    private volatile bool _leasesTaken;
    private readonly long? _maxSizeBytes;
    private long _maxPageCount;
    private volatile FullState? _full;
    private long _fullWrites;
    private volatile bool _disposed;

    private SqliteScorerStore(SqliteConnectionStringBuilder builder, SqliteStoreOptions options, TimeProvider clock)
    {
        if (options.MaxSizeBytes is < MinimumMaxSizeBytes)
        {
            throw new ArgumentOutOfRangeException(nameof(options), options.MaxSizeBytes,
                $"The SQLite store's size limit is {options.MaxSizeBytes} bytes; give at least {MinimumMaxSizeBytes} (1 MiB), or none.");
        }

        if (options.LeaseDuration <= TimeSpan.Zero)
        {
            throw new ArgumentOutOfRangeException(nameof(options), options.LeaseDuration,
                $"The SQLite store's LeaseDuration is {options.LeaseDuration}; give a positive time span (the default is {SqliteStoreOptions.DefaultLeaseDuration}).");
        }

        if (options.PruneBatchSize < 1)
        {
            throw new ArgumentOutOfRangeException(nameof(options), options.PruneBatchSize,
                $"The SQLite store's PruneBatchSize is {options.PruneBatchSize}; give at least 1 (the default is {SqliteStoreOptions.DefaultPruneBatchSize}).");
        }

        if (options.WriteCacheBytes < 1L << 20 || options.ReadCacheBytes < 1L << 20)
        {
            throw new ArgumentOutOfRangeException(nameof(options), (options.WriteCacheBytes, options.ReadCacheBytes),
                $"The SQLite store's page caches are {options.WriteCacheBytes} bytes (WriteCacheBytes) and {options.ReadCacheBytes} (ReadCacheBytes); give at least 1 MiB each.");
        }

        RetentionRules.Check(options.PredictionRetention, options.OutcomeRetention, options.PruneInterval, nameof(options));
        Options = options;
        _leaseMicroseconds = Math.Max(1, options.LeaseDuration.Ticks / StoreTime.TicksPerMicrosecond);
        _maxSizeBytes = options.MaxSizeBytes;
        if (builder.Mode == SqliteOpenMode.Memory || string.IsNullOrEmpty(builder.DataSource)
            || builder.DataSource == ":memory:" || builder.DataSource.Contains("mode=memory", StringComparison.OrdinalIgnoreCase))
        {
            throw new ArgumentException(
                "The SQLite store needs a database file: each call opens its own connection, and an in-memory database lives only as long as one connection.",
                "connectionString");
        }

        if (!builder.DataSource.StartsWith("file:", StringComparison.OrdinalIgnoreCase))
        {
            var folder = Path.GetDirectoryName(Path.GetFullPath(builder.DataSource));
            if (!string.IsNullOrEmpty(folder))
            {
                Directory.CreateDirectory(folder);
            }
        }

        builder.ForeignKeys = true;
        _connectionString = builder.ToString();
        _writeConnectionString = builder.Cache == SqliteCacheMode.Default
            ? new SqliteConnectionStringBuilder(_connectionString) { Cache = SqliteCacheMode.Private }.ToString()
            : _connectionString;
        // Per connection, so applied on every open. A checkpoint every 16,384 pages (64 MiB of WAL at 4 KiB pages)
        // rather than SQLite's 1,000: batches of keyed predictions dirty many index pages each, and with the default
        // nearly every batch paid for a checkpoint and its fsync (this roughly doubled the rate of such batches).
        // cache_size: each connection keeps its own page cache, and the pool keeps connections open, so the memory is
        // the cache size times the connections open at once. Writes (one at a time, under the write lock) get a large
        // cache (64 MiB unless set, rather than SQLite's 2 MiB): outcomes arriving in random order touch pages all over
        // the outcomes indexes (measured with bench/Scorer.Bench --outcomes: about 4 cache misses per outcome at 2 MiB,
        // 0.2 at 256 MiB). Reads (reports, the change feed; several at once) get a small one (8 MiB unless set): they
        // read pages once, and the system's file cache serves the rest. The two kinds pool apart: the write connections'
        // string asks for a private cache explicitly (Cache=Private), which is what a connection has anyway when the
        // shared cache is off (the default), but makes a different pool key.
        var busyTimeoutMs = (long)builder.DefaultTimeout * 1000;
        _readPragmas = Pragmas(busyTimeoutMs, options.ReadCacheBytes);
        _writePragmas = Pragmas(busyTimeoutMs, options.WriteCacheBytes);
        _clock = clock;
    }

    /// <summary>Opens (creating if missing, with its folder) the database file at <paramref name="path"/>.</summary>
    /// <param name="path">The database file.</param>
    /// <param name="clock">The clock that stamps applied migrations; the system clock by default.</param>
    public static SqliteScorerStore ForFile(string path, TimeProvider? clock = null) => ForFile(path, new SqliteStoreOptions(), clock);

    /// <summary>Opens (creating if missing, with its folder) the database file at <paramref name="path"/>, with <paramref name="options"/>.</summary>
    /// <param name="path">The database file.</param>
    /// <param name="options">The store's settings (a size limit).</param>
    /// <param name="clock">The clock that stamps applied migrations and refused writes; the system clock by default.</param>
    public static SqliteScorerStore ForFile(string path, SqliteStoreOptions options, TimeProvider? clock = null)
    {
        ArgumentException.ThrowIfNullOrWhiteSpace(path);
        ArgumentNullException.ThrowIfNull(options);
        return new SqliteScorerStore(
            new SqliteConnectionStringBuilder
            {
                DataSource = Path.GetFullPath(path),
                Mode = SqliteOpenMode.ReadWriteCreate,
                Pooling = true,
            },
            options,
            clock ?? TimeProvider.System);
    }

    /// <summary>
    /// Opens the database a Microsoft.Data.Sqlite connection string names. Its <c>Default Timeout</c> (seconds, 30
    /// unless set) is also the busy timeout; foreign keys are always turned on.
    /// </summary>
    /// <param name="connectionString">A connection string naming a database file (not an in-memory database).</param>
    /// <param name="clock">The clock that stamps applied migrations; the system clock by default.</param>
    public static SqliteScorerStore ForConnectionString(string connectionString, TimeProvider? clock = null)
    {
        ArgumentException.ThrowIfNullOrWhiteSpace(connectionString);
        return new SqliteScorerStore(new SqliteConnectionStringBuilder(connectionString), new SqliteStoreOptions(), clock ?? TimeProvider.System);
    }

    /// <summary>The options the store was opened with.</summary>
    public SqliteStoreOptions Options { get; }

    /// <summary>The smallest size limit the store takes: 1 MiB.</summary>
    public const long MinimumMaxSizeBytes = 1L << 20;

    /// <summary>
    /// How long the store still says it is full after a write was last refused for lack of space: a small write that
    /// still fits must not hide the larger ones (the prediction log's batches) that do not.
    /// </summary>
    public static readonly TimeSpan FullHold = TimeSpan.FromMinutes(1);

    /// <inheritdoc />
    /// <remarks>Set from the first refused write until none has been refused for <see cref="FullHold"/>.</remarks>
    public StoreFull? Full => _full is { } full && _clock.GetUtcNow() - full.Last < FullHold ? new StoreFull(full.Since, full.Reason) : null;

    /// <inheritdoc />
    public long FullWrites => Interlocked.Read(ref _fullWrites);

    /// <inheritdoc />
    public long HeldBytes => SQLitePCL.raw.sqlite3_memory_used();

    /// <summary>The highest migration this build knows; the schema version after <see cref="MigrateAsync"/>.</summary>
    public static int LatestSchemaVersion => Migration.All[^1].Version;

    /// <inheritdoc />
    public async Task MigrateAsync(CancellationToken cancellationToken = default)
    {
        await _writeLock.WaitAsync(cancellationToken).ConfigureAwait(false);
        try
        {
            await using var connection = await OpenAsync(write: true, cancellationToken).ConfigureAwait(false);

            // The journal mode belongs to the file and cannot change inside a transaction.
            var journalMode = Convert.ToString(Scalar(connection, null, "PRAGMA journal_mode = WAL;"), CultureInfo.InvariantCulture);
            if (!string.Equals(journalMode, "wal", StringComparison.OrdinalIgnoreCase))
            {
                throw new InvalidOperationException($"SQLite would not switch the database to WAL (journal mode is '{journalMode}').");
            }

            // BEGIN IMMEDIATE takes the write lock before reading which migrations are applied, so a second process
            // starting at the same moment waits here and then finds them all applied.
            using var transaction = connection.BeginTransaction(deferred: false);
            Execute(
                connection,
                transaction,
                "CREATE TABLE IF NOT EXISTS schema_migrations (version INTEGER NOT NULL PRIMARY KEY, applied_at INTEGER NOT NULL);");

            var applied = new HashSet<int>();
            using (var select = Command(connection, transaction, "SELECT version FROM schema_migrations;"))
            using (var reader = select.ExecuteReader())
            {
                while (reader.Read())
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

                Execute(connection, transaction, migration.Sql);
                using var record = Command(connection, transaction, "INSERT INTO schema_migrations (version, applied_at) VALUES ($version, $at);");
                record.Parameters.AddWithValue("$version", migration.Version);
                record.Parameters.AddWithValue("$at", StoreTime.ToUnixMicroseconds(_clock.GetUtcNow()));
                record.ExecuteNonQuery();
            }

            transaction.Commit();
        }
        finally
        {
            _writeLock.Release();
        }
    }

    /// <summary>
    /// Gives up the leases this instance holds and closes the pooled connections to the file. Calls after this throw
    /// <see cref="ObjectDisposedException"/>.
    /// </summary>
    public async ValueTask DisposeAsync()
    {
        if (!_disposed)
        {
            await ReleaseAllLeasesAsync().ConfigureAwait(false);
            _disposed = true;
            using var connection = new SqliteConnection(_connectionString);
            SqliteConnection.ClearPool(connection);
            using var writer = new SqliteConnection(_writeConnectionString);
            SqliteConnection.ClearPool(writer);
        }
    }

    /// <summary>
    /// Who this instance is in the <c>leases</c> table: the process id and a random id of the instance, so that two
    /// instances (in one process or in two) never pass for each other.
    /// </summary>
    public string LeaseHolder { get; } = string.Create(CultureInfo.InvariantCulture, $"{Environment.ProcessId}/{Guid.NewGuid():N}");

    private static string Pragmas(long busyTimeoutMs, long cacheBytes) => string.Create(CultureInfo.InvariantCulture,
        $"PRAGMA synchronous = NORMAL; PRAGMA wal_autocheckpoint = 16384; PRAGMA cache_size = -{Math.Max(1, cacheBytes >> 10)}; PRAGMA busy_timeout = {busyTimeoutMs};");

    /// <summary>A connection with this store's settings applied, for reading (a small page cache); also the tests' look at the file.</summary>
    internal Task<SqliteConnection> OpenAsync(CancellationToken cancellationToken) => OpenAsync(write: false, cancellationToken);

    /// <summary>A connection with this store's settings applied: for <paramref name="write"/>s (under the write lock) with the large page cache.</summary>
    private async Task<SqliteConnection> OpenAsync(bool write, CancellationToken cancellationToken)
    {
        ObjectDisposedException.ThrowIf(_disposed, this);
        var connection = new SqliteConnection(write ? _writeConnectionString : _connectionString);
        try
        {
            await connection.OpenAsync(cancellationToken).ConfigureAwait(false);

            // Per connection, not per file; cheap enough to repeat on every (pooled) open.
            Execute(connection, null, write ? _writePragmas : _readPragmas);
            if (_maxSizeBytes is { } maxSize)
            {
                // The limit in pages of the file's page size (read once); SQLite refuses a write that would grow the file
                // beyond it with SQLITE_FULL, as it does when the disk is full.
                if (Interlocked.Read(ref _maxPageCount) == 0)
                {
                    Interlocked.Exchange(ref _maxPageCount, Math.Max(1, maxSize / Convert.ToInt64(Scalar(connection, null, "PRAGMA page_size;"), CultureInfo.InvariantCulture)));
                }

                Execute(connection, null, string.Create(CultureInfo.InvariantCulture, $"PRAGMA max_page_count = {Interlocked.Read(ref _maxPageCount)};"));
            }

            return connection;
        }
        catch
        {
            await connection.DisposeAsync().ConfigureAwait(false);
            throw;
        }
    }

    private Task<T> WriteAsync<T>(Func<SqliteConnection, SqliteTransaction, T> work, CancellationToken cancellationToken) =>
        WriteAsync(work, cancellationToken, took: null);

    /// <param name="work">The transaction's statements.</param>
    /// <param name="cancellationToken">Stops the wait for the write lock.</param>
    /// <param name="took">Given how long the transaction lasted, from BEGIN IMMEDIATE to its COMMIT (the wait for the lock left out).</param>
    private async Task<T> WriteAsync<T>(Func<SqliteConnection, SqliteTransaction, T> work, CancellationToken cancellationToken, Action<TimeSpan>? took)
    {
        await _writeLock.WaitAsync(cancellationToken).ConfigureAwait(false);
        try
        {
            await using var connection = await OpenAsync(write: true, cancellationToken).ConfigureAwait(false);
            var started = System.Diagnostics.Stopwatch.GetTimestamp();
            using var transaction = connection.BeginTransaction(deferred: false);
            var result = work(connection, transaction);
            transaction.Commit();
            took?.Invoke(System.Diagnostics.Stopwatch.GetElapsedTime(started));
            return result;
        }
        catch (SqliteException ex) when (ex.SqliteErrorCode == SqliteFull)
        {
            throw Refused(ex, $"SQLite refused the write: {ex.Message} ({Describe()})");
        }
        catch (IOException ex) when (ex is not StoreFullException && StoreFullException.IsDiskFull(ex))
        {
            throw Refused(ex, $"The write failed: {ex.Message} ({Describe()})");
        }
        finally
        {
            _writeLock.Release();
        }
    }

    /// <summary>Notes a write refused for lack of space (<see cref="Full"/>, <see cref="FullWrites"/>) and says so; the transaction was rolled back.</summary>
    private StoreFullException Refused(Exception ex, string reason)
    {
        Interlocked.Increment(ref _fullWrites);
        var now = _clock.GetUtcNow();
        _full = new FullState(_full is { } last && now - last.Last < FullHold ? last.Since : now, now, reason);
        return new StoreFullException("No room left for the store, so nothing of this write was stored. " + reason, ex);
    }

    /// <summary>When writes began to be refused for lack of space, when the last one was, and why.</summary>
    private sealed record FullState(DateTimeOffset Since, DateTimeOffset Last, string Reason);

    private string Describe()
    {
        var file = new SqliteConnectionStringBuilder(_connectionString).DataSource;
        return _maxSizeBytes is { } limit
            ? string.Create(CultureInfo.InvariantCulture, $"{file}: the disk is full or the file reached its limit of {limit / (1 << 20)} MiB; free space or raise the limit")
            : $"{file}: free space on its disk";
    }

    private static SqliteCommand Command(SqliteConnection connection, SqliteTransaction? transaction, string sql)
    {
        var command = connection.CreateCommand();
        command.Transaction = transaction;
        command.CommandText = sql;
        return command;
    }

    private static void Execute(SqliteConnection connection, SqliteTransaction? transaction, string sql)
    {
        using var command = Command(connection, transaction, sql);
        command.ExecuteNonQuery();
    }

    private static object? Scalar(SqliteConnection connection, SqliteTransaction? transaction, string sql)
    {
        using var command = Command(connection, transaction, sql);
        return command.ExecuteScalar();
    }
}
