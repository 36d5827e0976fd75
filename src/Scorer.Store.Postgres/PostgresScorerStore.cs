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
public sealed partial class PostgresScorerStore : IScorerStore
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

        if (options.PredictionRetention is { } retention && retention <= TimeSpan.Zero)
        {
            throw new ArgumentException($"PredictionRetention is {retention}; it must be positive (or null to keep predictions forever).", nameof(options));
        }

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

    /// <inheritdoc />
    /// <remarks>Ordered by model, then version (ordinal: the columns are COLLATE "C").</remarks>
    public async Task<IReadOnlyList<ModelVersionRecord>> GetVersionsAsync(CancellationToken cancellationToken = default)
    {
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        await using var command = Command(connection, null, $"SELECT {StageColumns} FROM model_versions ORDER BY model, version");
        await using var reader = await command.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
        var versions = new List<ModelVersionRecord>();
        while (await reader.ReadAsync(cancellationToken).ConfigureAwait(false))
        {
            versions.Add(ReadVersion(reader));
        }

        return versions;
    }

    /// <inheritdoc />
    /// <remarks>The history entry is stamped with <see cref="ModelVersionRecord.LoadedAt"/>.</remarks>
    public async Task<ModelVersionRecord> AddVersionAsync(ModelVersionRecord version, string actor, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(version);
        ArgumentException.ThrowIfNullOrEmpty(version.Model, nameof(version));
        ArgumentException.ThrowIfNullOrEmpty(version.Version, nameof(version));
        ArgumentNullException.ThrowIfNull(version.FileSha256, nameof(version));
        ArgumentNullException.ThrowIfNull(actor);
        var stage = PostgresValues.ToText(version.Stage);

        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        await using var transaction = await connection.BeginTransactionAsync(cancellationToken).ConfigureAwait(false);
        await LockModelAsync(connection, transaction, StageLockClass, version.Model, cancellationToken).ConfigureAwait(false);
        await using (var insert = Command(connection, transaction,
            $"INSERT INTO model_versions ({StageColumns}) VALUES ($1, $2, $3, $4, $5) ON CONFLICT (model, version) DO NOTHING"))
        {
            insert.Parameters.Add(Text(version.Model));
            insert.Parameters.Add(Text(version.Version));
            insert.Parameters.Add(Text(version.FileSha256));
            insert.Parameters.Add(Timestamp(version.LoadedAt));
            insert.Parameters.Add(Text(stage));
            if (await insert.ExecuteNonQueryAsync(cancellationToken).ConfigureAwait(false) == 1)
            {
                await using var history = HistoryInsert(connection, transaction, version.Model, version.Version, null, stage, actor, version.LoadedAt);
                await history.ExecuteNonQueryAsync(cancellationToken).ConfigureAwait(false);
            }
        }

        var stored = await FindVersionAsync(connection, transaction, version.Model, version.Version, cancellationToken).ConfigureAwait(false)
            ?? throw new InvalidOperationException($"Version {version.Model}/{version.Version} vanished while being added.");
        await transaction.CommitAsync(cancellationToken).ConfigureAwait(false);
        return stored;
    }

    /// <inheritdoc />
    public async Task ChangeStagesAsync(IReadOnlyList<StageChange> changes, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(changes);
        if (changes.Count == 0)
        {
            return;
        }

        for (var i = 0; i < changes.Count; i++)
        {
            var change = changes[i] ?? throw new ArgumentException($"changes[{i}] is null.", nameof(changes));
            ArgumentException.ThrowIfNullOrEmpty(change.Model, nameof(changes));
            ArgumentException.ThrowIfNullOrEmpty(change.Version, nameof(changes));
            ArgumentNullException.ThrowIfNull(change.Actor, nameof(changes));
            _ = PostgresValues.ToText(change.To);
            if (change.From is { } from)
            {
                _ = PostgresValues.ToText(from);
            }
        }

        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        await using var transaction = await connection.BeginTransactionAsync(cancellationToken).ConfigureAwait(false);

        // The models' locks, then the versions' rows, each in one order, so that concurrent batches cannot deadlock.
        foreach (var model in changes.Select(c => c.Model).Distinct().Order(StringComparer.Ordinal))
        {
            await LockModelAsync(connection, transaction, StageLockClass, model, cancellationToken).ConfigureAwait(false);
        }

        var stages = new Dictionary<(string Model, string Version), string>();
        await using (var select = Command(connection, transaction,
            "SELECT v.model, v.version, v.stage FROM model_versions v JOIN unnest($1::text[], $2::text[]) AS n(model, version) "
            + "ON v.model = n.model AND v.version = n.version ORDER BY v.model, v.version FOR UPDATE OF v"))
        {
            select.Parameters.Add(TextArray([.. changes.Select(c => c.Model)]));
            select.Parameters.Add(TextArray([.. changes.Select(c => c.Version)]));
            await using var reader = await select.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
            while (await reader.ReadAsync(cancellationToken).ConfigureAwait(false))
            {
                stages[(reader.GetString(0), reader.GetString(1))] = reader.GetString(2);
            }
        }

        // In order: a later change to the same version sees the stage an earlier one set.
        var batch = new NpgsqlBatch(connection, transaction);
        await using (batch.ConfigureAwait(false))
        {
            foreach (var change in changes)
            {
                cancellationToken.ThrowIfCancellationRequested();
                if (!stages.TryGetValue((change.Model, change.Version), out var stored))
                {
                    throw new InvalidOperationException($"No stage was changed: version {change.Model}/{change.Version} is unknown to the store.");
                }

                if (change.From is { } from && PostgresValues.ToText(from) != stored)
                {
                    throw new InvalidOperationException(
                        $"No stage was changed: version {change.Model}/{change.Version} is {stored}, not {PostgresValues.ToText(from)} as the change expects.");
                }

                var to = PostgresValues.ToText(change.To);
                stages[(change.Model, change.Version)] = to;
                var update = new NpgsqlBatchCommand("UPDATE model_versions SET stage = $1 WHERE model = $2 AND version = $3");
                update.Parameters.Add(Text(to));
                update.Parameters.Add(Text(change.Model));
                update.Parameters.Add(Text(change.Version));
                batch.BatchCommands.Add(update);
                var history = new NpgsqlBatchCommand(HistorySql);
                AddHistoryParameters(history.Parameters, change.Model, change.Version, stored, to, change.Actor, change.At);
                batch.BatchCommands.Add(history);
            }

            await batch.ExecuteNonQueryAsync(cancellationToken).ConfigureAwait(false);
        }

        await transaction.CommitAsync(cancellationToken).ConfigureAwait(false);
    }

    /// <inheritdoc />
    /// <remarks>In the order the changes were made (which is oldest first unless the callers' clocks disagree).</remarks>
    public async Task<IReadOnlyList<StageChange>> GetHistoryAsync(string model, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(model);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        await using var command = Command(connection, null,
            "SELECT model, version, from_stage, to_stage, actor, at FROM stage_changes WHERE model = $1 ORDER BY id");
        command.Parameters.Add(Text(model));
        await using var reader = await command.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
        var history = new List<StageChange>();
        while (await reader.ReadAsync(cancellationToken).ConfigureAwait(false))
        {
            history.Add(new StageChange(
                reader.GetString(0),
                reader.GetString(1),
                reader.IsDBNull(2) ? null : PostgresValues.ToStage(reader.GetString(2)),
                PostgresValues.ToStage(reader.GetString(3)),
                reader.GetString(4),
                PostgresValues.FromTimestamp(reader.GetDateTime(5))));
        }

        return history;
    }

    /// <inheritdoc />
    /// <remarks>
    /// One transaction: a shared hold on the log's advisory lock (see <see cref="RecordImplicitNegativesAsync"/>), the
    /// per-minute counts upserted, then the rows by binary COPY. A repeated or stored id makes PostgreSQL refuse the
    /// COPY (unique violation); the transaction is rolled back and the id is looked up to name it.
    /// </remarks>
    public async Task WritePredictionsAsync(IReadOnlyList<PredictionRecord> batch, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(batch);
        if (batch.Count == 0)
        {
            return;
        }

        if (batch.Count > RowsPerBatchNumber)
        {
            throw new ArgumentException($"The batch holds {batch.Count:N0} predictions; at most {RowsPerBatchNumber:N0} are written at once.", nameof(batch));
        }

        // Checked before anything is written, so a bad row costs the batch nothing but the call.
        var seen = new HashSet<Guid>(batch.Count);
        var repeated = false;
        for (var i = 0; i < batch.Count; i++)
        {
            CheckPrediction(batch[i], i);
            repeated |= !seen.Add(batch[i].Id);
        }

        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        if (repeated)
        {
            throw await DuplicateIdErrorAsync(connection, batch, null, cancellationToken).ConfigureAwait(false);
        }

        var (models, versions, minutes, counts) = PredictionCopy.CountMinutes(batch);
        await using var transaction = await connection.BeginTransactionAsync(cancellationToken).ConfigureAwait(false);
        try
        {
            long batchNumber;
            var prelude = new NpgsqlBatch(connection, transaction);
            await using (prelude.ConfigureAwait(false))
            {
                // The lock before the batch number: the sweep's horizon then covers every number taken (see the sweep).
                prelude.BatchCommands.Add(new NpgsqlBatchCommand($"SELECT pg_advisory_xact_lock_shared({LogLockKey})"));
                prelude.BatchCommands.Add(new NpgsqlBatchCommand("SELECT nextval('prediction_batches')"));
                var minuteCounts = new NpgsqlBatchCommand(PredictionCopy.MinuteSql);
                minuteCounts.Parameters.Add(TextArray(models));
                minuteCounts.Parameters.Add(TextArray(versions));
                minuteCounts.Parameters.Add(new NpgsqlParameter<long[]> { TypedValue = minutes, NpgsqlDbType = NpgsqlDbType.Array | NpgsqlDbType.Bigint });
                minuteCounts.Parameters.Add(new NpgsqlParameter<long[]> { TypedValue = counts, NpgsqlDbType = NpgsqlDbType.Array | NpgsqlDbType.Bigint });
                prelude.BatchCommands.Add(minuteCounts);
                await using var reader = await prelude.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
                await reader.NextResultAsync(cancellationToken).ConfigureAwait(false);
                await reader.ReadAsync(cancellationToken).ConfigureAwait(false);
                batchNumber = reader.GetInt64(0);
            }

            await PredictionCopy.RunAsync(connection, batch, batchNumber * RowsPerBatchNumber, cancellationToken).ConfigureAwait(false);
            await transaction.CommitAsync(cancellationToken).ConfigureAwait(false);
        }
        catch (PostgresException ex) when (ex.SqlState == PostgresErrorCodes.UniqueViolation && ex.ConstraintName == "predictions_pkey")
        {
            await transaction.RollbackAsync(CancellationToken.None).ConfigureAwait(false);
            throw await DuplicateIdErrorAsync(connection, batch, ex, cancellationToken).ConfigureAwait(false);
        }
    }

    /// <summary>
    /// The error naming the first row of the batch that could not be written: the first whose id is already stored or
    /// repeats an earlier row's (the row a row-by-row insert would have stopped at).
    /// </summary>
    private static async Task<PredictionRefusedException> DuplicateIdErrorAsync(
        NpgsqlConnection connection, IReadOnlyList<PredictionRecord> batch, PostgresException? violation, CancellationToken cancellationToken)
    {
        var stored = new HashSet<Guid>();
        await using (var command = Command(connection, null, "SELECT id FROM predictions WHERE id = ANY($1)"))
        {
            command.Parameters.Add(new NpgsqlParameter<Guid[]> { TypedValue = [.. batch.Select(r => r.Id)], NpgsqlDbType = NpgsqlDbType.Array | NpgsqlDbType.Uuid });
            await using var reader = await command.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
            while (await reader.ReadAsync(cancellationToken).ConfigureAwait(false))
            {
                stored.Add(reader.GetGuid(0));
            }
        }

        var seen = new HashSet<Guid>(batch.Count);
        foreach (var row in batch)
        {
            if (stored.Contains(row.Id) || !seen.Add(row.Id))
            {
                return new PredictionRefusedException($"No prediction of the batch was written: id {row.Id} is repeated in the batch or already stored.", violation);
            }
        }

        // The clash was with a concurrent batch that has since rolled back; PostgreSQL's detail still names the key.
        return new PredictionRefusedException(
            $"No prediction of the batch was written: an id was being written by another batch at the same time ({violation?.Detail ?? violation?.MessageText}).",
            violation);
    }

    /// <inheritdoc />
    /// <remarks>
    /// Refusals: a row the contract checks refuse (<see cref="ArgumentException"/>), a repeated id (<see cref="PredictionRefusedException"/>), and the server's data exceptions (SQLSTATE class 22, e.g. 22021 for a
    /// U+0000 in text), integrity violations (class 23) and program limits (class 54, e.g. a row too large).
    /// </remarks>
    public bool IsRefusal(Exception error) => error switch
    {
        ArgumentException or PredictionRefusedException => true,
        PostgresException p => IsDataRefusal(p.SqlState),
        _ => false,
    };

    private static bool IsDataRefusal(string sqlState) =>
        sqlState.StartsWith("22", StringComparison.Ordinal) || sqlState.StartsWith("23", StringComparison.Ordinal) || sqlState.StartsWith("54", StringComparison.Ordinal);

    /// <inheritdoc />
    public async Task<PredictionRecord?> GetPredictionAsync(Guid id, CancellationToken cancellationToken = default)
    {
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        await using var command = Command(connection, null, $"SELECT {PredictionColumns} FROM predictions WHERE id = $1");
        command.Parameters.Add(new NpgsqlParameter<Guid> { TypedValue = id, NpgsqlDbType = NpgsqlDbType.Uuid });
        await using var reader = await command.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
        return await reader.ReadAsync(cancellationToken).ConfigureAwait(false) ? ReadPrediction(reader) : null;
    }

    /// <inheritdoc />
    /// <remarks>Predictions scored at the same microsecond come in the order they were written.</remarks>
    public async Task<IReadOnlyList<PredictionRecord>> GetPredictionsAsync(
        string model, string? version, DateTimeOffset from, DateTimeOffset to, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(model);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        var versionFilter = version is null ? string.Empty : "AND version = $4 ";
        await using var command = Command(connection, null,
            $"SELECT {PredictionColumns} FROM predictions WHERE model = $1 {versionFilter}AND scored_at >= $2 AND scored_at < $3 ORDER BY scored_at, log_seq");
        command.Parameters.Add(Text(model));
        command.Parameters.Add(Timestamp(from));
        command.Parameters.Add(Timestamp(to));
        if (version is not null)
        {
            command.Parameters.Add(Text(version));
        }

        await using var reader = await command.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
        var predictions = new List<PredictionRecord>();
        while (await reader.ReadAsync(cancellationToken).ConfigureAwait(false))
        {
            predictions.Add(ReadPrediction(reader));
        }

        return predictions;
    }

    /// <inheritdoc />
    public async Task<long> CountPredictionsAsync(string model, string? version = null, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(model);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        await using var command = Command(connection, null,
            version is null
                ? "SELECT count(*) FROM predictions WHERE model = $1"
                : "SELECT count(*) FROM predictions WHERE model = $1 AND version = $2");
        command.Parameters.Add(Text(model));
        if (version is not null)
        {
            command.Parameters.Add(Text(version));
        }

        return Convert.ToInt64(await command.ExecuteScalarAsync(cancellationToken).ConfigureAwait(false), CultureInfo.InvariantCulture);
    }

    /// <inheritdoc />
    public async Task<long> CountPredictionsByMinuteAsync(string model, string version, DateTimeOffset from, DateTimeOffset to,
        CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentNullException.ThrowIfNull(version);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        await using var command = Command(connection, null,
            "SELECT coalesce(sum(predictions), 0)::bigint FROM prediction_minutes WHERE model = $1 AND version = $2 AND minute >= $3 AND minute < $4");
        command.Parameters.Add(Text(model));
        command.Parameters.Add(Text(version));
        command.Parameters.Add(Bigint(PostgresValues.CeilingUnits(from, PostgresValues.MicrosecondsPerMinute)));
        command.Parameters.Add(Bigint(PostgresValues.CeilingUnits(to, PostgresValues.MicrosecondsPerMinute)));
        return Convert.ToInt64(await command.ExecuteScalarAsync(cancellationToken).ConfigureAwait(false), CultureInfo.InvariantCulture);
    }

    /// <inheritdoc />
    public async Task AddDriftCountsAsync(IReadOnlyList<DriftCount> counts, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(counts);
        if (counts.Count == 0)
        {
            return;
        }

        // Summed in memory first (one upsert may not touch a row twice), then upserted in key order (one lock order).
        var sums = new Dictionary<(string Model, string Version, long Hour, string Series, int Bin), long>();
        for (var i = 0; i < counts.Count; i++)
        {
            var c = counts[i] ?? throw new ArgumentException($"counts[{i}] is null.", nameof(counts));
            ArgumentNullException.ThrowIfNull(c.Model, nameof(counts));
            ArgumentNullException.ThrowIfNull(c.Version, nameof(counts));
            ArgumentNullException.ThrowIfNull(c.Series, nameof(counts));
            var key = (c.Model, c.Version, PostgresValues.Hour(c.Hour), c.Series, c.Bin);
            sums[key] = sums.GetValueOrDefault(key) + c.Rows;
        }

        var sorted = sums
            .OrderBy(s => s.Key.Model, StringComparer.Ordinal)
            .ThenBy(s => s.Key.Version, StringComparer.Ordinal)
            .ThenBy(s => s.Key.Hour)
            .ThenBy(s => s.Key.Series, StringComparer.Ordinal)
            .ThenBy(s => s.Key.Bin)
            .ToArray();
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        await using var upsert = Command(connection, null,
            "INSERT INTO drift_counts (model, version, hour, series, bin, \"rows\") "
            + "SELECT * FROM unnest($1::text[], $2::text[], $3::bigint[], $4::text[], $5::integer[], $6::bigint[]) "
            + "ON CONFLICT (model, version, hour, series, bin) DO UPDATE SET \"rows\" = drift_counts.\"rows\" + excluded.\"rows\"");
        upsert.Parameters.Add(TextArray([.. sorted.Select(s => s.Key.Model)]));
        upsert.Parameters.Add(TextArray([.. sorted.Select(s => s.Key.Version)]));
        upsert.Parameters.Add(new NpgsqlParameter<long[]> { TypedValue = [.. sorted.Select(s => s.Key.Hour)], NpgsqlDbType = NpgsqlDbType.Array | NpgsqlDbType.Bigint });
        upsert.Parameters.Add(TextArray([.. sorted.Select(s => s.Key.Series)]));
        upsert.Parameters.Add(new NpgsqlParameter<int[]> { TypedValue = [.. sorted.Select(s => s.Key.Bin)], NpgsqlDbType = NpgsqlDbType.Array | NpgsqlDbType.Integer });
        upsert.Parameters.Add(new NpgsqlParameter<long[]> { TypedValue = [.. sorted.Select(s => s.Value)], NpgsqlDbType = NpgsqlDbType.Array | NpgsqlDbType.Bigint });
        await upsert.ExecuteNonQueryAsync(cancellationToken).ConfigureAwait(false);
    }

    /// <inheritdoc />
    public async Task<IReadOnlyList<DriftCount>> GetDriftCountsAsync(string model, string version, DateTimeOffset from, DateTimeOffset to,
        CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentNullException.ThrowIfNull(version);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        await using var command = Command(connection, null,
            "SELECT series, bin, sum(\"rows\")::bigint FROM drift_counts WHERE model = $1 AND version = $2 AND hour >= $3 AND hour < $4 "
            + "GROUP BY series, bin ORDER BY series, bin");
        command.Parameters.Add(Text(model));
        command.Parameters.Add(Text(version));
        command.Parameters.Add(Bigint(PostgresValues.CeilingUnits(from, PostgresValues.MicrosecondsPerHour)));
        command.Parameters.Add(Bigint(PostgresValues.CeilingUnits(to, PostgresValues.MicrosecondsPerHour)));
        await using var reader = await command.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
        var counts = new List<DriftCount>();
        while (await reader.ReadAsync(cancellationToken).ConfigureAwait(false))
        {
            counts.Add(new DriftCount(model, version, from, reader.GetString(0), reader.GetInt32(1), reader.GetInt64(2)));
        }

        return counts;
    }

    /// <inheritdoc />
    public async Task<IReadOnlyList<PairedOutcome>> GetPairedAsync(string model, string liveVersion, string shadowVersion, DateTimeOffset from, DateTimeOffset to,
        CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentNullException.ThrowIfNull(liveVersion);
        ArgumentNullException.ThrowIfNull(shadowVersion);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        await using var command = Command(connection, null,
            "SELECT l.probability, s.probability, l.outcome FROM outcomes s JOIN outcomes l ON l.prediction_id = s.live_id "
            + "WHERE s.model = $1 AND s.version = $3 AND l.version = $2 AND l.scored_at >= $4 AND l.scored_at < $5 "
            + "ORDER BY l.scored_at, l.prediction_id");
        command.Parameters.Add(Text(model));
        command.Parameters.Add(Text(liveVersion));
        command.Parameters.Add(Text(shadowVersion));
        command.Parameters.Add(Timestamp(from));
        command.Parameters.Add(Timestamp(to));
        await using var reader = await command.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
        var pairs = new List<PairedOutcome>();
        while (await reader.ReadAsync(cancellationToken).ConfigureAwait(false))
        {
            pairs.Add(new PairedOutcome(reader.GetDouble(0), reader.GetDouble(1), (byte)reader.GetInt16(2)));
        }

        return pairs;
    }

    /// <inheritdoc />
    /// <remarks>Npgsql reads the rows as the server sends them, so an export of any size holds one row in memory at a time.</remarks>
    public async Task<IReadOnlyList<LabelledRow>> GetLabelledRowsAsync(string model, string? version, DateTimeOffset from, DateTimeOffset to,
        LabelledRowPosition? after, int limit, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentOutOfRangeException.ThrowIfLessThan(limit, 1);
        if (after is { } a && PostgresValues.ToTimestamp(a.ScoredAt) < PostgresValues.ToTimestamp(from))
        {
            after = null; // a position before the range: the range's start
        }

        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        // Each page is a range read of outcomes_by_model_time (model, scored_at, prediction_id) from its start, never a
        // sort; a later page starts at the position alone (beside "scored_at >= from" the range would start at from).
        var start = after is null ? "o.scored_at >= $4" : "(o.scored_at, o.prediction_id) > ($4, $5)";
        var versionFilter = version is null ? "" : $" AND o.version = ${(after is null ? 5 : 6)}";
        await using var command = Command(connection, null,
            "SELECT o.prediction_id, o.version, o.stage, o.scored_at, o.eta, o.probability, o.outcome, o.implicit, o.recorded_at, p.\"key\", p.features "
            + "FROM outcomes o JOIN predictions p ON p.id = o.prediction_id "
            + $"WHERE o.model = $1 AND {start} AND o.scored_at < $2{versionFilter} ORDER BY o.scored_at, o.prediction_id LIMIT $3");
        command.Parameters.Add(Text(model));
        command.Parameters.Add(Timestamp(to));
        command.Parameters.Add(new NpgsqlParameter<int> { TypedValue = limit, NpgsqlDbType = NpgsqlDbType.Integer });
        if (after is not { } position)
        {
            command.Parameters.Add(Timestamp(from));
        }
        else
        {
            command.Parameters.Add(Timestamp(position.ScoredAt));
            command.Parameters.Add(new NpgsqlParameter<Guid> { TypedValue = position.Id, NpgsqlDbType = NpgsqlDbType.Uuid });
        }

        if (version is not null)
        {
            command.Parameters.Add(Text(version));
        }

        await using var reader = await command.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
        var rows = new List<LabelledRow>(Math.Min(limit, 4096));
        while (await reader.ReadAsync(cancellationToken).ConfigureAwait(false))
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
        var versionFilter = version is null ? "" : "AND version = $4 ";
        await using var command = Command(connection, null,
            "SELECT prediction_id, version, stage, scored_at, eta, probability, outcome, implicit, recorded_at FROM outcomes "
            + $"WHERE model = $1 {versionFilter}AND scored_at >= $2 AND scored_at < $3 ORDER BY scored_at, prediction_id");
        command.Parameters.Add(Text(model));
        command.Parameters.Add(Timestamp(from));
        command.Parameters.Add(Timestamp(to));
        if (version is not null)
        {
            command.Parameters.Add(Text(version));
        }

        await using var reader = await command.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
        var labelled = new List<LabelledPrediction>();
        while (await reader.ReadAsync(cancellationToken).ConfigureAwait(false))
        {
            labelled.Add(ReadLabelled(reader));
        }

        return labelled;
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

    private static void CheckPrediction(PredictionRecord? row, int index)
    {
        StoreRules.CheckPrediction(row, index);
        CheckText(row!.Model, "Model", index, row.Id);
        CheckText(row.Version, "Version", index, row.Id);
        CheckText(row.Key, "Key", index, row.Id);
        CheckText(row.FeaturesJson, "FeaturesJson", index, row.Id);
    }

    /// <summary>PostgreSQL text cannot hold U+0000; refused before anything is written, naming the field.</summary>
    private static void CheckText(string? value, string field, int index, Guid id)
    {
        if (value is not null && value.Contains('\0', StringComparison.Ordinal))
        {
            throw new ArgumentException($"batch[{index}] (id {id}) has a {field} holding the character U+0000, which PostgreSQL text cannot store.", "batch");
        }
    }

    /// <summary>Takes a transaction-scoped advisory lock for one model of this schema (class, hashtext(schema.model)).</summary>
    private static async Task LockModelAsync(NpgsqlConnection connection, NpgsqlTransaction transaction, int lockClass, string model,
        CancellationToken cancellationToken)
    {
        await using var command = Command(connection, transaction, $"SELECT pg_advisory_xact_lock({lockClass}, hashtext(current_schema() || '.' || $1))");
        command.Parameters.Add(Text(model));
        await command.ExecuteNonQueryAsync(cancellationToken).ConfigureAwait(false);
    }

    private static async Task<ModelVersionRecord?> FindVersionAsync(NpgsqlConnection connection, NpgsqlTransaction transaction, string model, string version,
        CancellationToken cancellationToken)
    {
        await using var command = Command(connection, transaction, $"SELECT {StageColumns} FROM model_versions WHERE model = $1 AND version = $2");
        command.Parameters.Add(Text(model));
        command.Parameters.Add(Text(version));
        await using var reader = await command.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
        return await reader.ReadAsync(cancellationToken).ConfigureAwait(false) ? ReadVersion(reader) : null;
    }

    private static ModelVersionRecord ReadVersion(NpgsqlDataReader reader) => new(
        reader.GetString(0),
        reader.GetString(1),
        reader.GetString(2),
        PostgresValues.FromTimestamp(reader.GetDateTime(3)),
        PostgresValues.ToStage(reader.GetString(4)));

    /// <summary>A labelled prediction from the columns prediction_id, version, stage, scored_at, eta, probability, outcome, implicit, recorded_at.</summary>
    private static LabelledPrediction ReadLabelled(NpgsqlDataReader reader) => new(
        reader.GetGuid(0),
        reader.GetString(1),
        PostgresValues.ToStage(reader.GetString(2)),
        PostgresValues.FromTimestamp(reader.GetDateTime(3)),
        reader.GetDouble(4),
        reader.GetDouble(5),
        (byte)reader.GetInt16(6),
        reader.GetBoolean(7),
        PostgresValues.FromTimestamp(reader.GetDateTime(8)));

    private static PredictionRecord ReadPrediction(NpgsqlDataReader reader) => new(
        reader.GetGuid(0),
        reader.GetString(1),
        reader.GetString(2),
        PostgresValues.ToStage(reader.GetString(3)),
        PostgresValues.FromTimestamp(reader.GetDateTime(4)),
        reader.IsDBNull(5) ? null : reader.GetString(5),
        reader.GetDouble(6),
        reader.GetDouble(7),
        reader.GetString(8),
        reader.IsDBNull(9) ? null : reader.GetGuid(9));

    private const string HistorySql = "INSERT INTO stage_changes (model, version, from_stage, to_stage, actor, at) VALUES ($1, $2, $3, $4, $5, $6)";

    private static NpgsqlCommand HistoryInsert(NpgsqlConnection connection, NpgsqlTransaction transaction, string model, string version, string? from, string to,
        string actor, DateTimeOffset at)
    {
        var command = Command(connection, transaction, HistorySql);
        AddHistoryParameters(command.Parameters, model, version, from, to, actor, at);
        return command;
    }

    private static void AddHistoryParameters(NpgsqlParameterCollection parameters, string model, string version, string? from, string to, string actor,
        DateTimeOffset at)
    {
        parameters.Add(Text(model));
        parameters.Add(Text(version));
        parameters.Add(new NpgsqlParameter { Value = (object?)from ?? DBNull.Value, NpgsqlDbType = NpgsqlDbType.Text });
        parameters.Add(Text(to));
        parameters.Add(Text(actor));
        parameters.Add(Timestamp(at));
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
