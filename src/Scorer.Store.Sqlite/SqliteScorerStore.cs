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
/// </remarks>
public sealed class SqliteScorerStore : IScorerStore, IStoreSpaceSignal
{
    private const string StageColumns = "model, version, file_sha256, loaded_at, stage";
    /// <summary>SQLite's result code for a write that found no room (disk full, or max_page_count reached).</summary>
    private const int SqliteFull = 13;

    private const string PredictionColumns = "id, model, version, stage, scored_at, \"key\", eta, probability, features, live_id";

    private readonly string _connectionString;
    private readonly string _connectionPragmas;
    private readonly TimeProvider _clock;
    private readonly SemaphoreSlim _writeLock = new(1, 1);
    private readonly HashSet<string> _released = new(StringComparer.Ordinal);
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
        // Per connection, so applied on every open. A checkpoint every 16,384 pages (64 MiB of WAL at 4 KiB pages)
        // rather than SQLite's 1,000: batches of keyed predictions dirty many index pages each, and with the default
        // nearly every batch paid for a checkpoint and its fsync (this roughly doubled the rate of such batches).
        // cache_size: 64 MiB of pages per connection rather than SQLite's 2 MiB; outcomes arriving in random order touch
        // pages all over the outcomes indexes (measured with bench/Scorer.Bench --outcomes: about 4 cache misses per
        // outcome at 2 MiB, 0.2 at 256 MiB).
        var busyTimeoutMs = (long)builder.DefaultTimeout * 1000;
        _connectionPragmas = string.Create(
            CultureInfo.InvariantCulture, $"PRAGMA synchronous = NORMAL; PRAGMA wal_autocheckpoint = 16384; PRAGMA cache_size = -65536; PRAGMA busy_timeout = {busyTimeoutMs};");
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

    /// <summary>The highest migration this build knows; the schema version after <see cref="MigrateAsync"/>.</summary>
    public static int LatestSchemaVersion => Migration.All[^1].Version;

    /// <inheritdoc />
    public async Task MigrateAsync(CancellationToken cancellationToken = default)
    {
        await _writeLock.WaitAsync(cancellationToken).ConfigureAwait(false);
        try
        {
            await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);

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
                record.Parameters.AddWithValue("$at", StoredValues.ToUnixMicroseconds(_clock.GetUtcNow()));
                record.ExecuteNonQuery();
            }

            transaction.Commit();
        }
        finally
        {
            _writeLock.Release();
        }
    }

    /// <inheritdoc />
    /// <remarks>Ordered by model, then version (ordinal).</remarks>
    public async Task<IReadOnlyList<ModelVersionRecord>> GetVersionsAsync(CancellationToken cancellationToken = default)
    {
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        using var command = Command(connection, null, $"SELECT {StageColumns} FROM model_versions ORDER BY model, version;");
        using var reader = command.ExecuteReader();
        var versions = new List<ModelVersionRecord>();
        while (reader.Read())
        {
            versions.Add(ReadVersion(reader));
        }

        return versions;
    }

    /// <inheritdoc />
    /// <remarks>The history entry is stamped with <see cref="ModelVersionRecord.LoadedAt"/>.</remarks>
    public Task<ModelVersionRecord> AddVersionAsync(ModelVersionRecord version, string actor, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(version);
        ArgumentException.ThrowIfNullOrEmpty(version.Model, nameof(version));
        ArgumentException.ThrowIfNullOrEmpty(version.Version, nameof(version));
        ArgumentNullException.ThrowIfNull(version.FileSha256, nameof(version));
        ArgumentNullException.ThrowIfNull(actor);
        var stage = StoredValues.ToText(version.Stage);

        return WriteAsync(
            (connection, transaction) =>
            {
                using var insert = Command(
                    connection,
                    transaction,
                    $"INSERT INTO model_versions ({StageColumns}) VALUES ($model, $version, $sha, $loadedAt, $stage) ON CONFLICT (model, version) DO NOTHING;");
                insert.Parameters.AddWithValue("$model", version.Model);
                insert.Parameters.AddWithValue("$version", version.Version);
                insert.Parameters.AddWithValue("$sha", version.FileSha256);
                insert.Parameters.AddWithValue("$loadedAt", StoredValues.ToUnixMicroseconds(version.LoadedAt));
                insert.Parameters.AddWithValue("$stage", stage);
                if (insert.ExecuteNonQuery() == 1)
                {
                    using var history = HistoryInsert(connection, transaction);
                    BindHistory(history, version.Model, version.Version, null, stage, actor, version.LoadedAt);
                    history.ExecuteNonQuery();
                }

                return FindVersion(connection, transaction, version.Model, version.Version)
                    ?? throw new InvalidOperationException($"Version {version.Model}/{version.Version} vanished while being added.");
            },
            cancellationToken);
    }

    /// <inheritdoc />
    public Task ChangeStagesAsync(IReadOnlyList<StageChange> changes, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(changes);
        if (changes.Count == 0)
        {
            return Task.CompletedTask;
        }

        for (var i = 0; i < changes.Count; i++)
        {
            var change = changes[i] ?? throw new ArgumentException($"changes[{i}] is null.", nameof(changes));
            ArgumentException.ThrowIfNullOrEmpty(change.Model, nameof(changes));
            ArgumentException.ThrowIfNullOrEmpty(change.Version, nameof(changes));
            ArgumentNullException.ThrowIfNull(change.Actor, nameof(changes));
            _ = StoredValues.ToText(change.To);
            if (change.From is { } from)
            {
                _ = StoredValues.ToText(from);
            }
        }

        return WriteAsync(
            (connection, transaction) =>
            {
                using var select = Command(connection, transaction, "SELECT stage FROM model_versions WHERE model = $model AND version = $version;");
                var selectModel = select.Parameters.Add("$model", SqliteType.Text);
                var selectVersion = select.Parameters.Add("$version", SqliteType.Text);
                using var update = Command(connection, transaction, "UPDATE model_versions SET stage = $stage WHERE model = $model AND version = $version;");
                var updateStage = update.Parameters.Add("$stage", SqliteType.Text);
                var updateModel = update.Parameters.Add("$model", SqliteType.Text);
                var updateVersion = update.Parameters.Add("$version", SqliteType.Text);
                using var history = HistoryInsert(connection, transaction);

                // In order: a later change to the same version sees the stage an earlier one set.
                foreach (var change in changes)
                {
                    cancellationToken.ThrowIfCancellationRequested();
                    selectModel.Value = change.Model;
                    selectVersion.Value = change.Version;
                    var stored = select.ExecuteScalar() as string
                        ?? throw new InvalidOperationException(
                            $"No stage was changed: version {change.Model}/{change.Version} is unknown to the store.");
                    if (change.From is { } from && StoredValues.ToText(from) != stored)
                    {
                        throw new InvalidOperationException(
                            $"No stage was changed: version {change.Model}/{change.Version} is {stored}, not {StoredValues.ToText(from)} as the change expects.");
                    }

                    var to = StoredValues.ToText(change.To);
                    updateStage.Value = to;
                    updateModel.Value = change.Model;
                    updateVersion.Value = change.Version;
                    update.ExecuteNonQuery();
                    BindHistory(history, change.Model, change.Version, stored, to, change.Actor, change.At);
                    history.ExecuteNonQuery();
                }

                return true;
            },
            cancellationToken);
    }

    /// <inheritdoc />
    /// <remarks>In the order the changes were made (which is oldest first unless the callers' clocks disagree).</remarks>
    public async Task<IReadOnlyList<StageChange>> GetHistoryAsync(string model, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(model);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        using var command = Command(
            connection,
            null,
            "SELECT model, version, from_stage, to_stage, actor, at FROM stage_changes WHERE model = $model ORDER BY id;");
        command.Parameters.AddWithValue("$model", model);
        using var reader = command.ExecuteReader();
        var history = new List<StageChange>();
        while (reader.Read())
        {
            history.Add(new StageChange(
                reader.GetString(0),
                reader.GetString(1),
                reader.IsDBNull(2) ? null : StoredValues.ToStage(reader.GetString(2)),
                StoredValues.ToStage(reader.GetString(3)),
                reader.GetString(4),
                StoredValues.FromUnixMicroseconds(reader.GetInt64(5))));
        }

        return history;
    }

    /// <inheritdoc />
    public Task WritePredictionsAsync(IReadOnlyList<PredictionRecord> batch, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(batch);
        if (batch.Count == 0)
        {
            return Task.CompletedTask;
        }

        // Checked before anything is written, so a bad row costs the batch nothing but the call.
        for (var i = 0; i < batch.Count; i++)
        {
            CheckPrediction(batch[i], i);
        }

        return WriteAsync(
            (connection, _) =>
            {
                PredictionBatchInsert.Run(connection, batch, cancellationToken);
                return true;
            },
            cancellationToken);
    }

    /// <inheritdoc />
    /// <remarks>
    /// Refusals: a row the contract checks refuse (<see cref="ArgumentException"/>), a repeated id
    /// (<see cref="PredictionRefusedException"/>), and SQLite's constraint (19, e.g.
    /// a repeated id), too-big (18), mismatch (20) and range (25) errors.
    /// </remarks>
    public bool IsRefusal(Exception error) => error switch
    {
        ArgumentException or PredictionRefusedException => true,
        SqliteException { SqliteErrorCode: 18 or 19 or 20 or 25 } => true,
        _ => false,
    };

    /// <inheritdoc />
    public async Task<PredictionRecord?> GetPredictionAsync(Guid id, CancellationToken cancellationToken = default)
    {
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        using var command = Command(connection, null, $"SELECT {PredictionColumns} FROM predictions WHERE id = $id;");
        command.Parameters.Add("$id", SqliteType.Blob).Value = StoredValues.ToBytes(id);
        using var reader = command.ExecuteReader();
        return reader.Read() ? ReadPrediction(reader) : null;
    }

    /// <inheritdoc />
    /// <remarks>Predictions scored at the same microsecond come in the order they were written.</remarks>
    public async Task<IReadOnlyList<PredictionRecord>> GetPredictionsAsync(
        string model, string? version, DateTimeOffset from, DateTimeOffset to, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(model);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        var versionFilter = version is null ? string.Empty : "AND version = $version ";
        using var command = Command(
            connection,
            null,
            $"SELECT {PredictionColumns} FROM predictions WHERE model = $model {versionFilter}AND scored_at >= $from AND scored_at < $to ORDER BY scored_at, rowid;");
        command.Parameters.AddWithValue("$model", model);
        if (version is not null)
        {
            command.Parameters.AddWithValue("$version", version);
        }

        command.Parameters.AddWithValue("$from", StoredValues.ToUnixMicroseconds(from));
        command.Parameters.AddWithValue("$to", StoredValues.ToUnixMicroseconds(to));
        using var reader = command.ExecuteReader();
        var predictions = new List<PredictionRecord>();
        while (reader.Read())
        {
            cancellationToken.ThrowIfCancellationRequested();
            predictions.Add(ReadPrediction(reader));
        }

        return predictions;
    }

    /// <inheritdoc />
    public async Task<long> CountPredictionsAsync(string model, string? version = null, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(model);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        using var command = Command(
            connection,
            null,
            version is null
                ? "SELECT count(*) FROM predictions WHERE model = $model;"
                : "SELECT count(*) FROM predictions WHERE model = $model AND version = $version;");
        command.Parameters.AddWithValue("$model", model);
        if (version is not null)
        {
            command.Parameters.AddWithValue("$version", version);
        }

        return Convert.ToInt64(command.ExecuteScalar(), CultureInfo.InvariantCulture);
    }

    /// <summary>Closes the pooled connections to the file. Calls after this throw <see cref="ObjectDisposedException"/>.</summary>
    public ValueTask DisposeAsync()
    {
        if (!_disposed)
        {
            _disposed = true;
            using var connection = new SqliteConnection(_connectionString);
            SqliteConnection.ClearPool(connection);
        }

        return ValueTask.CompletedTask;
    }

    /// <summary>A connection with this store's settings applied; for the tests' look at the file.</summary>
    internal async Task<SqliteConnection> OpenAsync(CancellationToken cancellationToken)
    {
        ObjectDisposedException.ThrowIf(_disposed, this);
        var connection = new SqliteConnection(_connectionString);
        try
        {
            await connection.OpenAsync(cancellationToken).ConfigureAwait(false);

            // Per connection, not per file; cheap enough to repeat on every (pooled) open.
            Execute(connection, null, _connectionPragmas);
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

    private async Task<T> WriteAsync<T>(Func<SqliteConnection, SqliteTransaction, T> work, CancellationToken cancellationToken)
    {
        await _writeLock.WaitAsync(cancellationToken).ConfigureAwait(false);
        try
        {
            await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
            using var transaction = connection.BeginTransaction(deferred: false);
            var result = work(connection, transaction);
            transaction.Commit();
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

    private static void CheckPrediction(PredictionRecord? row, int index)
    {
        StoreRules.CheckPrediction(row, index);
    }

    private static ModelVersionRecord? FindVersion(SqliteConnection connection, SqliteTransaction transaction, string model, string version)
    {
        using var command = Command(connection, transaction, $"SELECT {StageColumns} FROM model_versions WHERE model = $model AND version = $version;");
        command.Parameters.AddWithValue("$model", model);
        command.Parameters.AddWithValue("$version", version);
        using var reader = command.ExecuteReader();
        return reader.Read() ? ReadVersion(reader) : null;
    }

    private static ModelVersionRecord ReadVersion(SqliteDataReader reader) => new(
        reader.GetString(0),
        reader.GetString(1),
        reader.GetString(2),
        StoredValues.FromUnixMicroseconds(reader.GetInt64(3)),
        StoredValues.ToStage(reader.GetString(4)));

    /// <inheritdoc />
    public async Task<long> CountPredictionsByMinuteAsync(string model, string version, DateTimeOffset from, DateTimeOffset to, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentNullException.ThrowIfNull(version);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        using var command = Command(connection, null,
            "SELECT coalesce(sum(predictions), 0) FROM prediction_minutes WHERE model = $model AND version = $version AND minute >= $from AND minute < $to;");
        command.Parameters.AddWithValue("$model", model);
        command.Parameters.AddWithValue("$version", version);
        command.Parameters.AddWithValue("$from", CeilingUnits(from, PredictionBatchInsert.MicrosecondsPerMinute));
        command.Parameters.AddWithValue("$to", CeilingUnits(to, PredictionBatchInsert.MicrosecondsPerMinute));
        return Convert.ToInt64(command.ExecuteScalar(), CultureInfo.InvariantCulture);
    }

    /// <inheritdoc />
    public Task<OutcomeReceipt> RecordOutcomesAsync(string model, IReadOnlyList<OutcomeReport> reports, ConflictPolicy policy, DateTimeOffset recordedAt,
        CancellationToken cancellationToken = default)
    {
        ArgumentException.ThrowIfNullOrEmpty(model);
        ArgumentNullException.ThrowIfNull(reports);
        for (var i = 0; i < reports.Count; i++)
        {
            var r = reports[i] ?? throw new ArgumentException($"reports[{i}] is null.", nameof(reports));
            if (r.Id is null == string.IsNullOrEmpty(r.Key))
            {
                throw new ArgumentException($"reports[{i}] must give either an id or a key.", nameof(reports));
            }

            if (r.Outcome > 1)
            {
                throw new ArgumentException($"reports[{i}] has outcome {r.Outcome}; outcomes are 0 or 1.", nameof(reports));
            }
        }

        var now = StoredValues.ToUnixMicroseconds(recordedAt);
        return WriteAsync(
            (connection, transaction) =>
            {
                using var byId = Command(connection, transaction,
                    "SELECT id, version, stage, scored_at, eta, probability, live_id FROM predictions WHERE model = $model AND (id = $id OR live_id = $id);");
                byId.Parameters.AddWithValue("$model", model);
                var idParameter = byId.Parameters.Add("$id", SqliteType.Blob);
                using var byKey = Command(connection, transaction,
                    "SELECT id, version, stage, scored_at, eta, probability, live_id FROM predictions WHERE model = $model AND \"key\" = $key;");
                byKey.Parameters.AddWithValue("$model", model);
                var keyParameter = byKey.Parameters.Add("$key", SqliteType.Text);
                using var existing = Command(connection, transaction, "SELECT outcome, implicit FROM outcomes WHERE prediction_id = $id;");
                var existingId = existing.Parameters.Add("$id", SqliteType.Blob);
                using var insert = Command(connection, transaction,
                    "INSERT INTO outcomes (prediction_id, model, version, stage, scored_at, eta, probability, outcome, observed_at, recorded_at, implicit, live_id, change) "
                    + "VALUES ($id, $model, $version, $stage, $scoredAt, $eta, $p, $outcome, $observedAt, $now, 0, $liveId, $change);");
                var insertId = insert.Parameters.Add("$id", SqliteType.Blob);
                insert.Parameters.AddWithValue("$model", model);
                var insertVersion = insert.Parameters.Add("$version", SqliteType.Text);
                var insertStage = insert.Parameters.Add("$stage", SqliteType.Text);
                var insertScoredAt = insert.Parameters.Add("$scoredAt", SqliteType.Integer);
                var insertEta = insert.Parameters.Add("$eta", SqliteType.Real);
                var insertP = insert.Parameters.Add("$p", SqliteType.Real);
                var insertOutcome = insert.Parameters.Add("$outcome", SqliteType.Integer);
                var insertObserved = insert.Parameters.Add("$observedAt", SqliteType.Integer);
                var insertLiveId = insert.Parameters.Add("$liveId", SqliteType.Blob);
                insert.Parameters.AddWithValue("$now", now);
                var change = NextChange(connection, transaction);
                insert.Parameters.AddWithValue("$change", change);
                using var update = Command(connection, transaction,
                    "UPDATE outcomes SET outcome = $outcome, observed_at = $observedAt, recorded_at = $now, implicit = 0, change = $change WHERE prediction_id = $id;");
                update.Parameters.AddWithValue("$change", change);
                var updateOutcome = update.Parameters.Add("$outcome", SqliteType.Integer);
                var updateObserved = update.Parameters.Add("$observedAt", SqliteType.Integer);
                update.Parameters.AddWithValue("$now", now);
                var updateId = update.Parameters.Add("$id", SqliteType.Blob);
                using var conflict = Command(connection, transaction,
                    "INSERT INTO outcome_conflicts (prediction_id, model, recorded, reported, kept, was_implicit, at) VALUES ($id, $model, $recorded, $reported, $kept, $implicit, $now);");
                var conflictId = conflict.Parameters.Add("$id", SqliteType.Blob);
                conflict.Parameters.AddWithValue("$model", model);
                var conflictRecorded = conflict.Parameters.Add("$recorded", SqliteType.Integer);
                var conflictReported = conflict.Parameters.Add("$reported", SqliteType.Integer);
                var conflictKept = conflict.Parameters.Add("$kept", SqliteType.Integer);
                var conflictImplicit = conflict.Parameters.Add("$implicit", SqliteType.Integer);
                conflict.Parameters.AddWithValue("$now", now);

                int accepted = 0, duplicates = 0;
                var unknown = new List<(int Index, string Name)>();
                var conflicts = new List<(int Index, string Name)>();
                var targets = new List<(byte[] Id, string Version, string Stage, long ScoredAt, double Eta, double P, byte[]? LiveId)>();

                // Applied in id order (stable, so reports of one prediction keep their order): time-ordered ids then
                // touch the indexes' pages in order rather than at random (measured: about 1.6 to 1.0 pages written
                // per outcome when outcomes arrive shuffled). The receipt lists keep the reports' order.
                var order = Enumerable.Range(0, reports.Count).OrderBy(i => reports[i].Id ?? Guid.Empty).ThenBy(i => i).ToArray();
                foreach (var index in order)
                {
                    var report = reports[index];
                    cancellationToken.ThrowIfCancellationRequested();
                    var name = report.Id is { } g ? g.ToString() : report.Key!;
                    targets.Clear();
                    SqliteCommand find;
                    if (report.Id is { } guid)
                    {
                        idParameter.Value = StoredValues.ToBytes(guid);
                        find = byId;
                    }
                    else
                    {
                        keyParameter.Value = report.Key;
                        find = byKey;
                    }

                    using (var reader = find.ExecuteReader())
                    {
                        while (reader.Read())
                        {
                            targets.Add((reader.GetFieldValue<byte[]>(0), reader.GetString(1), reader.GetString(2), reader.GetInt64(3), reader.GetDouble(4),
                                reader.GetDouble(5), reader.IsDBNull(6) ? null : reader.GetFieldValue<byte[]>(6)));
                        }
                    }

                    if (targets.Count == 0)
                    {
                        unknown.Add((index, name));
                        continue;
                    }

                    bool labelled = false, differed = false;
                    object observed = report.ObservedAt is { } o ? StoredValues.ToUnixMicroseconds(o) : DBNull.Value;
                    foreach (var t in targets)
                    {
                        existingId.Value = t.Id;
                        long? recorded = null;
                        var wasImplicit = false;
                        using (var reader = existing.ExecuteReader())
                        {
                            if (reader.Read())
                            {
                                recorded = reader.GetInt64(0);
                                wasImplicit = reader.GetInt64(1) == 1;
                            }
                        }

                        if (recorded is null)
                        {
                            insertId.Value = t.Id;
                            insertVersion.Value = t.Version;
                            insertStage.Value = t.Stage;
                            insertScoredAt.Value = t.ScoredAt;
                            insertEta.Value = t.Eta;
                            insertP.Value = t.P;
                            insertOutcome.Value = (long)report.Outcome;
                            insertObserved.Value = observed;
                            insertLiveId.Value = t.LiveId is null ? DBNull.Value : t.LiveId;
                            insert.ExecuteNonQuery();
                            labelled = true;
                        }
                        else if (recorded != report.Outcome)
                        {
                            differed = true;
                            var keep = policy == ConflictPolicy.TakeLatest ? report.Outcome : recorded.Value;
                            conflictId.Value = t.Id;
                            conflictRecorded.Value = recorded.Value;
                            conflictReported.Value = (long)report.Outcome;
                            conflictKept.Value = keep;
                            conflictImplicit.Value = wasImplicit ? 1L : 0L;
                            conflict.ExecuteNonQuery();
                            if (policy == ConflictPolicy.TakeLatest)
                            {
                                updateOutcome.Value = (long)report.Outcome;
                                updateObserved.Value = observed;
                                updateId.Value = t.Id;
                                update.ExecuteNonQuery();
                            }
                        }
                    }

                    if (differed)
                    {
                        conflicts.Add((index, name));
                    }
                    else if (labelled)
                    {
                        accepted++;
                    }
                    else
                    {
                        duplicates++;
                    }
                }

                return new OutcomeReceipt(accepted, duplicates, [.. unknown.OrderBy(u => u.Index).Select(u => u.Name)],
                    [.. conflicts.OrderBy(c => c.Index).Select(c => c.Name)]);
            },
            cancellationToken);
    }

    /// <inheritdoc />
    public Task<int> RecordImplicitNegativesAsync(string model, DateTimeOffset maturedBefore, DateTimeOffset recordedAt, int limit = 10_000,
        CancellationToken cancellationToken = default)
    {
        ArgumentException.ThrowIfNullOrEmpty(model);
        ArgumentOutOfRangeException.ThrowIfLessThan(limit, 1);
        var cutoff = StoredValues.ToUnixMicroseconds(maturedBefore);
        var now = StoredValues.ToUnixMicroseconds(recordedAt);
        return WriteAsync(
            (connection, transaction) =>
            {
                using var cursor = Command(connection, transaction, "SELECT last_row FROM maturity_cursors WHERE model = $model;");
                cursor.Parameters.AddWithValue("$model", model);
                var from = cursor.ExecuteScalar() is long l ? l : 0L;

                // Walk the log in the order it was written. The walk stops at the first row of the model not yet mature,
                // so a row logged late with an early time is still reached by a later call.
                using var walk = Command(connection, transaction,
                    "SELECT rowid, id, version, stage, scored_at, eta, probability, live_id FROM predictions WHERE model = $model AND rowid > $from ORDER BY rowid LIMIT $limit;");
                walk.Parameters.AddWithValue("$model", model);
                walk.Parameters.AddWithValue("$from", from);
                walk.Parameters.AddWithValue("$limit", limit);
                using var insert = Command(connection, transaction,
                    "INSERT INTO outcomes (prediction_id, model, version, stage, scored_at, eta, probability, outcome, observed_at, recorded_at, implicit, live_id, change) "
                    + "VALUES ($id, $model, $version, $stage, $scoredAt, $eta, $p, 0, NULL, $now, 1, $liveId, $change) ON CONFLICT (prediction_id) DO NOTHING;");
                var id = insert.Parameters.Add("$id", SqliteType.Blob);
                insert.Parameters.AddWithValue("$model", model);
                var version = insert.Parameters.Add("$version", SqliteType.Text);
                var stage = insert.Parameters.Add("$stage", SqliteType.Text);
                var scoredAt = insert.Parameters.Add("$scoredAt", SqliteType.Integer);
                var eta = insert.Parameters.Add("$eta", SqliteType.Real);
                var p = insert.Parameters.Add("$p", SqliteType.Real);
                var liveId = insert.Parameters.Add("$liveId", SqliteType.Blob);
                insert.Parameters.AddWithValue("$now", now);
                insert.Parameters.AddWithValue("$change", NextChange(connection, transaction));
                var last = from;
                var recorded = 0;
                using (var reader = walk.ExecuteReader())
                {
                    while (reader.Read())
                    {
                        if (reader.GetInt64(4) >= cutoff)
                        {
                            break;
                        }

                        last = reader.GetInt64(0);
                        id.Value = reader.GetFieldValue<byte[]>(1);
                        version.Value = reader.GetString(2);
                        stage.Value = reader.GetString(3);
                        scoredAt.Value = reader.GetInt64(4);
                        eta.Value = reader.GetDouble(5);
                        p.Value = reader.GetDouble(6);
                        liveId.Value = reader.IsDBNull(7) ? DBNull.Value : reader.GetFieldValue<byte[]>(7);
                        recorded += insert.ExecuteNonQuery();
                    }
                }

                if (last != from)
                {
                    using var save = Command(connection, transaction,
                        "INSERT INTO maturity_cursors (model, last_row) VALUES ($model, $last) ON CONFLICT (model) DO UPDATE SET last_row = excluded.last_row;");
                    save.Parameters.AddWithValue("$model", model);
                    save.Parameters.AddWithValue("$last", last);
                    save.ExecuteNonQuery();
                }

                return recorded;
            },
            cancellationToken);
    }

    private const long MicrosecondsPerHour = 3_600_000_000;

    /// <inheritdoc />
    public Task AddDriftCountsAsync(IReadOnlyList<DriftCount> counts, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(counts);
        if (counts.Count == 0)
        {
            return Task.CompletedTask;
        }

        return WriteAsync(
            (connection, transaction) =>
            {
                using var upsert = Command(connection, transaction,
                    "INSERT INTO drift_counts (model, version, hour, series, bin, rows) VALUES ($model, $version, $hour, $series, $bin, $rows) "
                    + "ON CONFLICT (model, version, hour, series, bin) DO UPDATE SET rows = rows + excluded.rows;");
                var model = upsert.Parameters.Add("$model", SqliteType.Text);
                var version = upsert.Parameters.Add("$version", SqliteType.Text);
                var hour = upsert.Parameters.Add("$hour", SqliteType.Integer);
                var series = upsert.Parameters.Add("$series", SqliteType.Text);
                var bin = upsert.Parameters.Add("$bin", SqliteType.Integer);
                var rows = upsert.Parameters.Add("$rows", SqliteType.Integer);
                foreach (var c in counts)
                {
                    model.Value = c.Model;
                    version.Value = c.Version;
                    hour.Value = StoredValues.ToUnixMicroseconds(c.Hour) / MicrosecondsPerHour;
                    series.Value = c.Series;
                    bin.Value = c.Bin;
                    rows.Value = c.Rows;
                    upsert.ExecuteNonQuery();
                }

                return true;
            },
            cancellationToken);
    }

    /// <inheritdoc />
    public async Task<IReadOnlyList<DriftCount>> GetDriftCountsAsync(string model, string version, DateTimeOffset from, DateTimeOffset to,
        CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentNullException.ThrowIfNull(version);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        using var command = Command(connection, null,
            "SELECT series, bin, sum(rows) FROM drift_counts WHERE model = $model AND version = $version AND hour >= $from AND hour < $to "
            + "GROUP BY series, bin ORDER BY series, bin;");
        command.Parameters.AddWithValue("$model", model);
        command.Parameters.AddWithValue("$version", version);
        command.Parameters.AddWithValue("$from", CeilingUnits(from, MicrosecondsPerHour));
        command.Parameters.AddWithValue("$to", CeilingUnits(to, MicrosecondsPerHour));
        using var reader = command.ExecuteReader();
        var counts = new List<DriftCount>();
        while (reader.Read())
        {
            counts.Add(new DriftCount(model, version, from, reader.GetString(0), reader.GetInt32(1), reader.GetInt64(2)));
        }

        return counts;
    }

    private static long CeilingUnits(DateTimeOffset time, long unit)
    {
        var us = StoredValues.ToUnixMicroseconds(time);
        var n = us / unit;
        return n * unit == us ? n : n + 1;
    }

    /// <inheritdoc />
    public async Task<IReadOnlyList<PairedOutcome>> GetPairedAsync(string model, string liveVersion, string shadowVersion, DateTimeOffset from, DateTimeOffset to,
        CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(model);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        using var command = Command(connection, null,
            "SELECT l.probability, s.probability, l.outcome FROM outcomes s JOIN outcomes l ON l.prediction_id = s.live_id "
            + "WHERE s.model = $model AND s.version = $shadow AND l.version = $live AND l.scored_at >= $from AND l.scored_at < $to "
            + "ORDER BY l.scored_at, l.prediction_id;");
        command.Parameters.AddWithValue("$model", model);
        command.Parameters.AddWithValue("$live", liveVersion);
        command.Parameters.AddWithValue("$shadow", shadowVersion);
        command.Parameters.AddWithValue("$from", StoredValues.ToUnixMicroseconds(from));
        command.Parameters.AddWithValue("$to", StoredValues.ToUnixMicroseconds(to));
        using var reader = command.ExecuteReader();
        var pairs = new List<PairedOutcome>();
        while (reader.Read())
        {
            pairs.Add(new PairedOutcome(reader.GetDouble(0), reader.GetDouble(1), (byte)reader.GetInt64(2)));
        }

        return pairs;
    }

    /// <inheritdoc />
    public async Task<IReadOnlyList<LabelledRow>> GetLabelledRowsAsync(string model, string? version, DateTimeOffset from, DateTimeOffset to,
        LabelledRowPosition? after, int limit, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentOutOfRangeException.ThrowIfLessThan(limit, 1);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        var versionFilter = version is null ? "" : "AND o.version = $version ";
        if (after is { } a && StoredValues.ToUnixMicroseconds(a.ScoredAt) < StoredValues.ToUnixMicroseconds(from))
        {
            after = null; // a position before the range: the range's start
        }

        // Each page is a range read of outcomes_by_model_time (model, scored_at, prediction_id) from its start, never a
        // sort. A later page starts at the position alone: with "scored_at >= from" beside it SQLite would start every
        // page at the range's start and filter, reading the export over and over.
        var start = after is null ? "AND o.scored_at >= $from " : "AND (o.scored_at, o.prediction_id) > ($afterAt, $afterId) ";
        using var command = Command(connection, null,
            "SELECT o.prediction_id, o.version, o.stage, o.scored_at, o.eta, o.probability, o.outcome, o.implicit, o.recorded_at, p.\"key\", p.features "
            + "FROM outcomes o JOIN predictions p ON p.id = o.prediction_id "
            + $"WHERE o.model = $model {versionFilter}{start}AND o.scored_at < $to "
            + "ORDER BY o.scored_at, o.prediction_id LIMIT $limit;");
        command.Parameters.AddWithValue("$model", model);
        if (version is not null)
        {
            command.Parameters.AddWithValue("$version", version);
        }

        command.Parameters.AddWithValue("$to", StoredValues.ToUnixMicroseconds(to));
        if (after is not { } position)
        {
            command.Parameters.AddWithValue("$from", StoredValues.ToUnixMicroseconds(from));
        }
        else
        {
            command.Parameters.AddWithValue("$afterAt", StoredValues.ToUnixMicroseconds(position.ScoredAt));
            command.Parameters.Add("$afterId", SqliteType.Blob).Value = StoredValues.ToBytes(position.Id);
        }

        command.Parameters.AddWithValue("$limit", limit);
        using var reader = command.ExecuteReader();
        var rows = new List<LabelledRow>(Math.Min(limit, 4096));
        while (reader.Read())
        {
            rows.Add(new LabelledRow(ReadLabelled(reader), reader.IsDBNull(9) ? null : reader.GetString(9), reader.GetString(10)));
        }

        return rows;
    }

    /// <inheritdoc />
    public async Task<IReadOnlyList<LabelledPrediction>> GetLabelledAsync(string model, string? version, DateTimeOffset from, DateTimeOffset to,
        CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(model);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        var versionFilter = version is null ? "" : "AND version = $version ";
        using var command = Command(connection, null,
            "SELECT prediction_id, version, stage, scored_at, eta, probability, outcome, implicit, recorded_at FROM outcomes "
            + $"WHERE model = $model {versionFilter}AND scored_at >= $from AND scored_at < $to ORDER BY scored_at, prediction_id;");
        command.Parameters.AddWithValue("$model", model);
        if (version is not null)
        {
            command.Parameters.AddWithValue("$version", version);
        }

        command.Parameters.AddWithValue("$from", StoredValues.ToUnixMicroseconds(from));
        command.Parameters.AddWithValue("$to", StoredValues.ToUnixMicroseconds(to));
        using var reader = command.ExecuteReader();
        var labelled = new List<LabelledPrediction>();
        while (reader.Read())
        {
            labelled.Add(ReadLabelled(reader));
        }

        return labelled;
    }

    /// <inheritdoc />
    public async Task<LabelledChanges> GetLabelledChangesAsync(string model, string version, long cursor, CancellationToken cancellationToken = default)
    {
        ArgumentException.ThrowIfNullOrEmpty(model);
        ArgumentException.ThrowIfNullOrEmpty(version);
        ArgumentOutOfRangeException.ThrowIfNegative(cursor);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        using var command = Command(connection, null,
            "SELECT prediction_id, scored_at, probability, outcome, change FROM outcomes WHERE model = $model AND version = $version AND change > $cursor ORDER BY change;");
        command.Parameters.AddWithValue("$model", model);
        command.Parameters.AddWithValue("$version", version);
        command.Parameters.AddWithValue("$cursor", cursor);
        var points = new List<LabelledPoint>();
        var last = cursor;
        using (var reader = command.ExecuteReader())
        {
            while (reader.Read())
            {
                cancellationToken.ThrowIfCancellationRequested();
                // GetFieldValue<byte[]>, not GetBytes: the driver's GetBytes opens a blob handle per call (measured 4.5 µs a row).
                points.Add(new LabelledPoint(StoredValues.ToGuid(reader.GetFieldValue<byte[]>(0)), StoredValues.FromUnixMicroseconds(reader.GetInt64(1)), reader.GetDouble(2),
                    (byte)reader.GetInt64(3)));
                last = reader.GetInt64(4);
            }
        }

        // Changes are numbered in commit order (NextChange), so every later commit carries a number above the last one read.
        return new LabelledChanges(points, last);
    }

    /// <inheritdoc />
    /// <remarks>A SQLite file serves one process: every lease is this instance's until it is released or disposed.</remarks>
    public Task<bool> TryHoldLeaseAsync(string name, CancellationToken cancellationToken = default)
    {
        ArgumentException.ThrowIfNullOrEmpty(name);
        ObjectDisposedException.ThrowIf(_disposed, this);
        lock (_released)
        {
            _released.Remove(name);
        }

        return Task.FromResult(true);
    }

    /// <inheritdoc />
    public Task ReleaseLeaseAsync(string name, CancellationToken cancellationToken = default)
    {
        ArgumentException.ThrowIfNullOrEmpty(name);
        lock (_released)
        {
            _released.Add(name);
        }

        return Task.CompletedTask;
    }

    /// <inheritdoc />
    public Task SaveChartStateAsync(string model, string version, string state, string lease, CancellationToken cancellationToken = default)
    {
        ArgumentException.ThrowIfNullOrEmpty(model);
        ArgumentException.ThrowIfNullOrEmpty(version);
        ArgumentNullException.ThrowIfNull(state);
        lock (_released)
        {
            if (_released.Contains(lease))
            {
                throw new LeaseLostException(lease);
            }
        }

        var now = StoredValues.ToUnixMicroseconds(_clock.GetUtcNow());
        return WriteAsync(
            (connection, transaction) =>
            {
                using var save = Command(connection, transaction,
                    "INSERT INTO chart_states (model, version, state, saved_at) VALUES ($model, $version, $state, $now) "
                    + "ON CONFLICT (model, version) DO UPDATE SET state = excluded.state, saved_at = excluded.saved_at;");
                save.Parameters.AddWithValue("$model", model);
                save.Parameters.AddWithValue("$version", version);
                save.Parameters.AddWithValue("$state", state);
                save.Parameters.AddWithValue("$now", now);
                return save.ExecuteNonQuery();
            },
            cancellationToken);
    }

    /// <inheritdoc />
    public async Task<string?> GetChartStateAsync(string model, string version, CancellationToken cancellationToken = default)
    {
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        using var command = Command(connection, null, "SELECT state FROM chart_states WHERE model = $model AND version = $version;");
        command.Parameters.AddWithValue("$model", model);
        command.Parameters.AddWithValue("$version", version);
        return command.ExecuteScalar() as string;
    }

    /// <summary>Takes the next outcome change number, inside the write transaction (see migration 0004).</summary>
    private static long NextChange(SqliteConnection connection, SqliteTransaction transaction)
    {
        using var next = Command(connection, transaction, "UPDATE outcome_change_counter SET last = last + 1 WHERE id = 1 RETURNING last;");
        return Convert.ToInt64(next.ExecuteScalar(), CultureInfo.InvariantCulture);
    }

    /// <summary>A labelled prediction from the columns prediction_id, version, stage, scored_at, eta, probability, outcome, implicit, recorded_at.</summary>
    private static LabelledPrediction ReadLabelled(SqliteDataReader reader) => new(
        StoredValues.ToGuid(reader.GetFieldValue<byte[]>(0)),
        reader.GetString(1),
        StoredValues.ToStage(reader.GetString(2)),
        StoredValues.FromUnixMicroseconds(reader.GetInt64(3)),
        reader.GetDouble(4),
        reader.GetDouble(5),
        (byte)reader.GetInt64(6),
        reader.GetInt64(7) == 1,
        StoredValues.FromUnixMicroseconds(reader.GetInt64(8)));

    private static PredictionRecord ReadPrediction(SqliteDataReader reader) => new(
        StoredValues.ToGuid(reader.GetFieldValue<byte[]>(0)),
        reader.GetString(1),
        reader.GetString(2),
        StoredValues.ToStage(reader.GetString(3)),
        StoredValues.FromUnixMicroseconds(reader.GetInt64(4)),
        reader.IsDBNull(5) ? null : reader.GetString(5),
        reader.GetDouble(6),
        reader.GetDouble(7),
        reader.GetString(8),
        reader.IsDBNull(9) ? null : StoredValues.ToGuid(reader.GetFieldValue<byte[]>(9)));

    private static SqliteCommand HistoryInsert(SqliteConnection connection, SqliteTransaction transaction)
    {
        var command = Command(
            connection,
            transaction,
            "INSERT INTO stage_changes (model, version, from_stage, to_stage, actor, at) VALUES ($model, $version, $from, $to, $actor, $at);");
        command.Parameters.Add("$model", SqliteType.Text);
        command.Parameters.Add("$version", SqliteType.Text);
        command.Parameters.Add("$from", SqliteType.Text);
        command.Parameters.Add("$to", SqliteType.Text);
        command.Parameters.Add("$actor", SqliteType.Text);
        command.Parameters.Add("$at", SqliteType.Integer);
        return command;
    }

    private static void BindHistory(SqliteCommand history, string model, string version, string? from, string to, string actor, DateTimeOffset at)
    {
        history.Parameters["$model"].Value = model;
        history.Parameters["$version"].Value = version;
        history.Parameters["$from"].Value = (object?)from ?? DBNull.Value;
        history.Parameters["$to"].Value = to;
        history.Parameters["$actor"].Value = actor;
        history.Parameters["$at"].Value = StoredValues.ToUnixMicroseconds(at);
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
