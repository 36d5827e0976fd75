using System.Globalization;
using Npgsql;
using Scorer.Store.Postgres;

namespace Scorer.Store.Tests;

/// <summary>
/// The PostgreSQL store's daily partitions (migration 0007): made ahead, rows of a default partition given a partition
/// of their day, dropped whole by the retention (looked at in the catalog, pg_inherits), and the conversion of a store
/// written by the schema before them.
/// </summary>
[RequiresPostgres]
public sealed class PostgresPartitionTests : IAsyncLifetime
{
    private static readonly DateTimeOffset T0 = new(2025, 3, 14, 9, 26, 53, 589, TimeSpan.Zero);

    private readonly string _schema = PostgresServer.NewSchemaName();
    private readonly List<PostgresScorerStore> _opened = [];

    public Task InitializeAsync() => Task.CompletedTask;

    public async Task DisposeAsync()
    {
        foreach (var store in _opened)
        {
            await store.DisposeAsync();
        }

        await PostgresServer.DropSchemaAsync(_schema);
    }

    [Fact]
    public async Task A_pass_makes_partitions_for_today_and_the_days_ahead_and_gives_rows_of_a_default_partition_a_partition_of_their_day()
    {
        var store = await OpenAsync(new PostgresStoreOptions());
        var far = Prediction(T0.AddDays(-200));
        await store.WritePredictionsAsync([far]);
        await store.RecordOutcomesAsync("renewal", [new OutcomeReport(far.Id, null, 1)], ConflictPolicy.KeepFirst, T0);
        Assert.Equal(1L, await ScalarAsync("SELECT count(*) FROM predictions_default"));

        var result = await store.PruneAsync(T0);

        var expected = Enumerable.Range(0, PostgresScorerStore.PartitionDaysAhead + 1).Select(d => Day(T0.AddDays(d))).Append(Day(far.ScoredAt)).ToHashSet();
        Assert.Superset(expected, (await PartitionsAsync("predictions")).ToHashSet());
        Assert.Superset(expected, (await PartitionsAsync("outcomes")).ToHashSet());
        Assert.Equal(expected.Count * 2, result.PartitionsCreated);
        Assert.Equal(0L, await ScalarAsync("SELECT count(*) FROM predictions_default"));
        Assert.Equal(0L, await ScalarAsync("SELECT count(*) FROM outcomes_default"));
        Assert.Equal(1L, await ScalarAsync($"SELECT count(*) FROM {PostgresScorerStore.PartitionName("predictions", Day(far.ScoredAt))}"));
        Assert.NotNull(await store.GetPredictionAsync(far.Id));
        Assert.Single(await store.GetLabelledAsync("renewal", "1", far.ScoredAt, far.ScoredAt.AddDays(1)));

        // A second pass finds nothing to make.
        Assert.Equal(0, (await store.PruneAsync(T0)).PartitionsCreated);
    }

    [Fact]
    public async Task The_retention_drops_a_day_partition_whole_only_once_the_day_is_past_it_and_nothing_in_it_awaits_an_outcome()
    {
        var store = await OpenAsync(new PostgresStoreOptions { PredictionRetention = TimeSpan.FromDays(30), OutcomeRetention = TimeSpan.FromDays(60) });
        await store.AddVersionAsync(new ModelVersionRecord("renewal", "1", "aaaa", T0, Stage.Live), "loader");
        var done = Prediction(T0);
        var awaiting = Prediction(T0.AddDays(1));
        var doneNextDay = Prediction(T0.AddDays(1).AddHours(1));
        await store.WritePredictionsAsync([done, awaiting, doneNextDay]);
        await store.RecordOutcomesAsync("renewal", [new OutcomeReport(done.Id, null, 1), new OutcomeReport(doneNextDay.Id, null, 0)], ConflictPolicy.KeepFirst, T0);
        await store.PruneAsync(T0); // the partitions of the days

        // 30 days and a few hours after T0: T0's day is within the retention still (it ends 30 days before the next midnight).
        var early = await store.PruneAsync(Day(T0).AddDays(31).AddHours(-1));
        Assert.Equal((0, 0), (early.PartitionsDropped, early.PredictionsDeleted));

        var result = await store.PruneAsync(Day(T0).AddDays(32).AddHours(1));

        Assert.Equal((1, 1L, 1L), (result.PartitionsDropped, result.PredictionsDeleted, result.KeptAwaitingOutcome));
        var predictions = await PartitionsAsync("predictions");
        Assert.DoesNotContain(Day(T0), predictions);
        Assert.Contains(Day(T0.AddDays(1)), predictions); // kept whole: one prediction in it awaits its outcome
        Assert.Contains(Day(T0), await PartitionsAsync("outcomes")); // outcomes stay for their own retention
        Assert.NotNull(await store.GetPredictionAsync(doneNextDay.Id));

        // The awaited outcome comes: that day goes too, and, past the outcome retention, the outcomes of both days
        // (their predictions gone); the empty partitions made ahead for days now past the retention go as well.
        await store.RecordOutcomesAsync("renewal", [new OutcomeReport(awaiting.Id, null, 1)], ConflictPolicy.KeepFirst, T0.AddDays(40));
        var later = await store.PruneAsync(Day(T0).AddDays(70));
        Assert.Equal((2L, 0L, 3L), (later.PredictionsDeleted, later.KeptAwaitingOutcome, later.OutcomesDeleted));
        Assert.DoesNotContain(Day(T0.AddDays(1)), await PartitionsAsync("predictions"));
        Assert.DoesNotContain(Day(T0), await PartitionsAsync("outcomes"));
        Assert.DoesNotContain(Day(T0.AddDays(1)), await PartitionsAsync("outcomes"));
        Assert.Empty(await store.GetLabelledAsync("renewal", "1", T0.AddDays(-1), T0.AddDays(3)));
    }

    [Fact]
    public async Task A_lookup_by_id_reads_only_the_partition_of_the_time_the_id_carries()
    {
        var store = await OpenAsync(new PostgresStoreOptions());
        var row = Prediction(T0);
        await store.WritePredictionsAsync([row]);
        await store.PruneAsync(T0.AddDays(-20)); // partitions for other days around, so that there are some to leave out
        await store.PruneAsync(T0.AddDays(20));

        await using var connection = await PostgresServer.ConnectAsync(_schema);
        var (from, to) = IdTimes.Window(row.Id);
        await using var explain = new NpgsqlCommand("EXPLAIN (ANALYZE, COSTS OFF, TIMING OFF, SUMMARY OFF) SELECT id FROM predictions WHERE id = $1 AND scored_at >= $2 AND scored_at < $3", connection);
        explain.Parameters.Add(new NpgsqlParameter<Guid> { TypedValue = row.Id });
        explain.Parameters.Add(new NpgsqlParameter<DateTime> { TypedValue = from!.Value, NpgsqlDbType = NpgsqlTypes.NpgsqlDbType.TimestampTz });
        explain.Parameters.Add(new NpgsqlParameter<DateTime> { TypedValue = to!.Value, NpgsqlDbType = NpgsqlTypes.NpgsqlDbType.TimestampTz });
        var plan = new List<string>();
        await using (var reader = await explain.ExecuteReaderAsync())
        {
            while (await reader.ReadAsync())
            {
                plan.Add(reader.GetString(0));
            }
        }

        Assert.Single(plan, l => l.Contains(PostgresScorerStore.PartitionName("predictions", Day(T0)), StringComparison.Ordinal));
        Assert.DoesNotContain(plan, l => l.Contains("predictions_default", StringComparison.Ordinal) || l.Contains("predictions_2025032", StringComparison.Ordinal));
        Assert.Equal(row.Id, (await store.GetPredictionAsync(row.Id))?.Id);
    }

    [Fact]
    public async Task The_migration_converts_a_store_written_by_the_schema_before_it_with_every_row_kept()
    {
        // A store at schema 6, written as the driver before migration 0007 wrote it.
        var live = Guid.CreateVersion7(T0);
        await using (var connection = await PostgresServer.ConnectAsync(_schema))
        {
            await ExecuteAsync(connection, $"CREATE SCHEMA {_schema}; SET search_path = {_schema}; "
                + "CREATE TABLE schema_migrations (version integer NOT NULL PRIMARY KEY, applied_at timestamptz NOT NULL)");
            foreach (var migration in Migration.All.Where(m => m.Version <= 6))
            {
                await ExecuteAsync(connection, migration.Sql);
                await ExecuteAsync(connection, string.Create(CultureInfo.InvariantCulture, $"INSERT INTO schema_migrations VALUES ({migration.Version}, now())"));
            }

            await ExecuteAsync(connection,
                "INSERT INTO model_versions VALUES ('renewal', '1', 'aaaa', '2025-03-01', 'live'); "
                + "INSERT INTO predictions (id, log_seq, model, version, stage, scored_at, \"key\", eta, probability, features, live_id) VALUES "
                + $"('{live}', 16777216, 'renewal', '1', 'live', '2025-03-14 09:26:53.589+00', 'k1', -0.0, 0.5, '{{\"a\":1}}', NULL), "
                + $"('{Guid.CreateVersion7(T0.AddDays(1))}', 16777217, 'renewal', '1', 'live', '2025-03-15 09:26:53.589123+00', NULL, 1.5, 0.8175744761936437, '{{}}', NULL), "
                + "('6f0b1c8e-3d2a-4b5c-9e7f-1a2b3c4d5e6f', 16777218, 'renewal', '1', 'live', '2025-03-16 00:00:00+00', 'k3', 0.25, 0.5621765008857981, '{}', NULL), "
                + $"('{Guid.CreateVersion7(T0.AddDays(9))}', 16777219, 'renewal', '2', 'shadow', '2025-03-16 12:00:00+00', 'k1', 0.1, 0.52, '{{}}', '{live}'); "
                + "INSERT INTO outcomes (prediction_id, model, version, stage, scored_at, eta, probability, outcome, observed_at, recorded_at, implicit, live_id, revised) "
                + $"SELECT id, model, version, stage, scored_at, eta, probability, 1, NULL, '2025-03-20', false, live_id, true FROM predictions WHERE \"key\" = 'k1'; "
                + "INSERT INTO outcome_conflicts (prediction_id, model, recorded, reported, kept, was_implicit, at) "
                + $"VALUES ('{live}', 'renewal', 1, 0, 1, false, '2025-03-21'); "
                + "INSERT INTO labelled_summaries VALUES ('renewal', '1', '', '2025-03-14', 86400, 3, '\\x0102'); "
                + "INSERT INTO summary_states VALUES ('renewal', '1', 7, 3, '2025-03-22')");
        }

        var before = await SnapshotAsync();
        var store = await OpenAsync(new PostgresStoreOptions(), migrate: false);

        await store.MigrateAsync();

        Assert.Equal(before, await SnapshotAsync());
        Assert.Equal(PostgresScorerStore.LatestSchemaVersion, (int)await ScalarAsync("SELECT max(version)::bigint FROM schema_migrations"));
        Assert.Superset(new[] { Day(T0), Day(T0.AddDays(1)), Day(T0.AddDays(2)) }.ToHashSet(), (await PartitionsAsync("predictions")).ToHashSet());
        Assert.Equal(1L, await ScalarAsync("SELECT count(*) FROM pg_partitioned_table WHERE partrelid = 'predictions'::regclass"));
        // The v4 id and the shadow whose id was made 8 days after its time cannot be found from their id: listed with their time.
        Assert.Equal(2L, await ScalarAsync("SELECT count(*) FROM prediction_times"));
        foreach (var id in await QueryAsync("SELECT id FROM predictions", r => r.GetGuid(0)))
        {
            Assert.Equal(id, (await store.GetPredictionAsync(id))?.Id);
        }

        // The store works on the converted tables: a report by id reaches the stored outcome (a conflict), by key too.
        var receipt = await store.RecordOutcomesAsync("renewal", [new OutcomeReport(live, null, 0), new OutcomeReport(null, "k3", 1)],
            ConflictPolicy.KeepFirst, T0.AddDays(30));
        Assert.Empty(receipt.Unknown);
        Assert.Contains(live.ToString(), receipt.Conflicts);
        Assert.Single(await store.GetLabelledAsync("renewal", "1", T0.AddDays(2).AddHours(-10), T0.AddDays(2)));
    }

    // ---- helpers -------------------------------------------------------------------------------------------------

    /// <summary>Every row of the tables the migration rewrites or must leave alone, as text, in a fixed order.</summary>
    private Task<List<string>> SnapshotAsync() => QueryAsync(
        "SELECT 'p ' || p::text FROM (SELECT id, log_seq, model, version, stage, scored_at, \"key\", eta::text, probability::text, features, live_id FROM predictions ORDER BY id) p "
        + "UNION ALL SELECT 'o ' || o::text FROM (SELECT prediction_id, model, version, stage, scored_at, eta::text, probability::text, outcome, observed_at, recorded_at, implicit, live_id, change, revised FROM outcomes ORDER BY prediction_id) o "
        + "UNION ALL SELECT 'c ' || c::text FROM (SELECT * FROM outcome_conflicts ORDER BY id) c "
        + "UNION ALL SELECT 's ' || s::text FROM (SELECT * FROM labelled_summaries) s UNION ALL SELECT 't ' || t::text FROM (SELECT * FROM summary_states) t",
        r => r.GetString(0));

    private async Task<PostgresScorerStore> OpenAsync(PostgresStoreOptions options, bool migrate = true)
    {
        var store = PostgresScorerStore.ForConnectionString(await PostgresServer.ConnectionStringAsync(), options with { Schema = _schema });
        _opened.Add(store);
        if (migrate)
        {
            await store.MigrateAsync();
        }

        return store;
    }

    private static PredictionRecord Prediction(DateTimeOffset at) =>
        new(PredictionIds.Next(at), "renewal", "1", Stage.Live, at, null, -1.25, 0.2227001388253309, "{\"age\":41}");

    private static DateTime Day(DateTimeOffset time) => DateTime.SpecifyKind(time.UtcDateTime.Date, DateTimeKind.Utc);

    /// <summary>The days of a table's partitions, from the catalog.</summary>
    private async Task<List<DateTime>> PartitionsAsync(string table)
    {
        await using var connection = await PostgresServer.ConnectAsync(_schema);
        return [.. await PostgresScorerStore.PartitionDaysAsync(connection, table, CancellationToken.None)];
    }

    private async Task<long> ScalarAsync(string sql)
    {
        await using var connection = await PostgresServer.ConnectAsync(_schema);
        await using var command = new NpgsqlCommand(sql, connection);
        return Convert.ToInt64(await command.ExecuteScalarAsync(), CultureInfo.InvariantCulture);
    }

    private async Task<List<T>> QueryAsync<T>(string sql, Func<NpgsqlDataReader, T> read)
    {
        await using var connection = await PostgresServer.ConnectAsync(_schema);
        await using var command = new NpgsqlCommand(sql, connection);
        await using var reader = await command.ExecuteReaderAsync();
        var rows = new List<T>();
        while (await reader.ReadAsync())
        {
            rows.Add(read(reader));
        }

        return rows;
    }

    private static async Task ExecuteAsync(NpgsqlConnection connection, string sql)
    {
        await using var command = new NpgsqlCommand(sql, connection);
        await command.ExecuteNonQueryAsync();
    }
}
