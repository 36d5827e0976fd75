using System.Globalization;
using Npgsql;
using NpgsqlTypes;

namespace Scorer.Store.Postgres;

/// <summary>Model versions, their stages and the history of stage changes.</summary>
public sealed partial class PostgresScorerStore
{
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
        StoreRules.CheckVersion(version, actor);
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
        StoreRules.CheckStageChanges(changes);
        if (changes.Count == 0)
        {
            return;
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
}
