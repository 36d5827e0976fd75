using Microsoft.Data.Sqlite;

namespace Scorer.Store.Sqlite;

/// <summary>Model versions, their stages and the history of stage changes.</summary>
public sealed partial class SqliteScorerStore
{
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
        StoreRules.CheckVersion(version, actor);
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
                insert.Parameters.AddWithValue("$loadedAt", StoreTime.ToUnixMicroseconds(version.LoadedAt));
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
        StoreRules.CheckStageChanges(changes);
        if (changes.Count == 0)
        {
            return Task.CompletedTask;
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
                StoreTime.FromUnixMicroseconds(reader.GetInt64(5))));
        }

        return history;
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
        StoreTime.FromUnixMicroseconds(reader.GetInt64(3)),
        StoredValues.ToStage(reader.GetString(4)));

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
        history.Parameters["$at"].Value = StoreTime.ToUnixMicroseconds(at);
    }
}
