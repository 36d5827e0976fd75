using System.Globalization;
using Npgsql;
using Scorer.Store.Postgres;

namespace Scorer.Store.Tests;

/// <summary>
/// What the PostgreSQL store does beyond the contract: its schema bookkeeping and types, its locks against concurrent
/// replicas, the change feed and the sweep with transactions in flight, leases, retention. Each test in a fresh schema.
/// </summary>
[RequiresPostgres]
public sealed class PostgresStoreTests : IAsyncLifetime
{
    private static readonly DateTimeOffset T0 = new(2025, 3, 14, 9, 26, 53, 589, TimeSpan.Zero);
    private static readonly DateTimeOffset MigratedAt = new(2025, 2, 3, 4, 5, 6, 789, TimeSpan.Zero);

    private readonly string _schema = PostgresServer.NewSchemaName();
    private readonly List<string> _otherSchemas = [];
    private readonly List<IAsyncDisposable> _opened = [];

    public Task InitializeAsync() => Task.CompletedTask;

    public async Task DisposeAsync()
    {
        foreach (var opened in _opened)
        {
            await opened.DisposeAsync();
        }

        await PostgresServer.DropSchemaAsync(_schema);
        foreach (var other in _otherSchemas)
        {
            await PostgresServer.DropSchemaAsync(other);
        }
    }

    // ---- migrations ----------------------------------------------------------------------------------------------

    [Fact]
    public void The_embedded_migrations_are_numbered_from_one_without_gaps()
    {
        var versions = Migration.All.Select(m => m.Version).ToArray();

        Assert.Equal(Enumerable.Range(1, versions.Length), versions);
        Assert.Equal("0001_initial.sql", Migration.All[0].Name);
        Assert.Equal(versions[^1], PostgresScorerStore.LatestSchemaVersion);
    }

    [Fact]
    public async Task Each_migration_is_recorded_once_stamped_by_the_injected_clock_however_often_stores_migrate()
    {
        var first = await OpenAsync(clock: new FixedClock(MigratedAt));
        await first.MigrateAsync();
        await (await OpenAsync(clock: new FixedClock(MigratedAt.AddDays(1)))).MigrateAsync();

        var rows = await QueryAsync("SELECT version, to_char(applied_at AT TIME ZONE 'UTC', 'YYYY-MM-DD HH24:MI:SS.US') FROM schema_migrations ORDER BY version",
            r => (r.GetInt32(0), r.GetString(1)));

        Assert.Equal(Migration.All.Select(m => (m.Version, "2025-02-03 04:05:06.789000")), rows);
    }

    [Fact]
    public async Task A_database_at_a_newer_schema_version_is_refused_naming_both_versions()
    {
        await OpenAsync();
        await ExecuteAsync("INSERT INTO schema_migrations (version, applied_at) VALUES (999, now())");

        var newer = await OpenAsync(migrate: false);
        var error = await Assert.ThrowsAsync<InvalidOperationException>(() => newer.MigrateAsync());

        Assert.Contains("999", error.Message, StringComparison.Ordinal);
        Assert.Contains(PostgresScorerStore.LatestSchemaVersion.ToString(CultureInfo.InvariantCulture), error.Message, StringComparison.Ordinal);
    }

    [Fact]
    public async Task Migrating_waits_for_the_advisory_lock_held_by_a_replica_that_is_migrating()
    {
        await using var replica = await PostgresServer.ConnectAsync(_schema);
        await using var held = await replica.BeginTransactionAsync();
        await using (var take = new NpgsqlCommand($"SELECT pg_advisory_xact_lock({PostgresScorerStore.MigrationLockKey})", replica, held))
        {
            await take.ExecuteNonQueryAsync();
        }

        var store = await OpenAsync(migrate: false);
        var migrating = store.MigrateAsync();

        // The store's session shows up waiting for that very lock, and has created nothing yet.
        await WaitUntilAsync(async () => await WaitersForAsync(PostgresScorerStore.MigrationLockKey) == 1);
        Assert.False(migrating.IsCompleted);
        Assert.Equal(0L, await ScalarAsync<long>($"SELECT count(*) FROM pg_namespace WHERE nspname = '{_schema}'"));

        await held.CommitAsync();
        await migrating;
        Assert.Empty(await store.GetVersionsAsync());
    }

    // ---- types and values ----------------------------------------------------------------------------------------

    [Fact]
    public async Task Predictions_are_stored_as_uuid_timestamptz_at_microseconds_float8_and_text_with_the_stage_name()
    {
        var id = Guid.Parse("00112233-4455-6677-8899-aabbccddeeff");
        var second = new DateTimeOffset(2025, 3, 14, 9, 26, 53, TimeSpan.Zero);
        var store = await OpenAsync();
        await store.WritePredictionsAsync([new PredictionRecord(id, "renewal", "1", Stage.Shadow, second.AddTicks(1_234_567), null, -0.0, 0.5, "{}")]);

        var row = Assert.Single(await QueryAsync(
            "SELECT id::text, to_char(scored_at AT TIME ZONE 'UTC', 'YYYY-MM-DD HH24:MI:SS.US'), stage, \"key\" IS NULL, pg_typeof(eta)::text, eta::text, probability::text FROM predictions",
            r => (r.GetString(0), r.GetString(1), r.GetString(2), r.GetBoolean(3), r.GetString(4), r.GetString(5), r.GetString(6))));
        Assert.Equal(("00112233-4455-6677-8899-aabbccddeeff", "2025-03-14 09:26:53.123456", "shadow", true, "double precision", "-0", "0.5"), row);
        Assert.Equal(
            [("eta", "double precision"), ("id", "uuid"), ("scored_at", "timestamp with time zone")],
            await QueryAsync(
                "SELECT column_name::text, data_type::text FROM information_schema.columns WHERE table_schema = $1 AND table_name = 'predictions' AND column_name IN ('id', 'scored_at', 'eta') ORDER BY column_name",
                r => (r.GetString(0), r.GetString(1)),
                _schema));
    }

    [Fact]
    public async Task Times_are_kept_to_the_microsecond_rounded_towards_the_past_before_and_after_1970_and_at_the_ends_of_the_calendar()
    {
        DateTimeOffset[] times =
        [
            new DateTimeOffset(2025, 3, 14, 9, 26, 53, TimeSpan.Zero).AddTicks(1_234_567),
            new DateTimeOffset(1969, 7, 20, 20, 17, 40, TimeSpan.Zero).AddTicks(-3),
            DateTimeOffset.UnixEpoch.AddTicks(-1),
            DateTimeOffset.UnixEpoch,
            new DateTimeOffset(9999, 12, 31, 23, 59, 59, TimeSpan.Zero).AddTicks(9_999_999),
            new DateTimeOffset(1, 1, 1, 0, 0, 0, TimeSpan.Zero),
        ];
        var rows = times.Select(t => new PredictionRecord(Guid.NewGuid(), "renewal", "1", Stage.Live, t, null, 0.25, 0.5, "{}")).ToArray();
        var store = await OpenAsync();

        await store.WritePredictionsAsync(rows);

        foreach (var row in rows)
        {
            var back = await store.GetPredictionAsync(row.Id);
            var expected = row.ScoredAt.AddTicks(-(((row.ScoredAt.UtcTicks % 10) + 10) % 10));
            Assert.Equal(expected, back!.ScoredAt);
            Assert.Equal(TimeSpan.Zero, back.ScoredAt.Offset);
        }
    }

    [Theory]
    [InlineData("FeaturesJson")]
    [InlineData("Key")]
    [InlineData("Version")]
    public async Task A_prediction_holding_the_character_u0000_which_postgresql_text_cannot_store_is_refused_naming_the_field_and_nothing_is_written(string field)
    {
        var store = await OpenAsync();
        var rows = Enumerable.Range(0, 4).Select(i => Prediction("renewal", "1", T0.AddSeconds(i))).ToArray();
        rows[2] = field switch
        {
            "FeaturesJson" => rows[2] with { FeaturesJson = "{\"note\":\"a\0b\"}" },
            "Key" => rows[2] with { Key = "policy\0-1" },
            _ => rows[2] with { Version = "1\0" },
        };

        var error = await Assert.ThrowsAsync<ArgumentException>(() => store.WritePredictionsAsync(rows));

        Assert.Contains(field, error.Message, StringComparison.Ordinal);
        Assert.Contains(rows[2].Id.ToString(), error.Message, StringComparison.Ordinal);
        Assert.Equal(0, await store.CountPredictionsAsync("renewal"));
    }

    [Fact]
    public async Task A_report_by_a_key_holding_the_character_u0000_is_listed_as_unknown_as_no_prediction_can_carry_it()
    {
        var store = await OpenAsync();
        await store.WritePredictionsAsync([Prediction("renewal", "1", T0, key: "policy-1")]);

        var receipt = await store.RecordOutcomesAsync("renewal", [new OutcomeReport(null, "policy\0-1", 1), new OutcomeReport(null, "policy-1", 1)],
            ConflictPolicy.KeepFirst, T0.AddDays(1));

        Assert.Equal(["policy\0-1"], receipt.Unknown);
        Assert.Equal(1, receipt.Accepted);
    }

    // ---- schemas and connection strings --------------------------------------------------------------------------

    [Fact]
    public async Task Two_stores_in_different_schemas_of_one_database_see_only_their_own_data()
    {
        var mine = await OpenAsync();
        var otherSchema = PostgresServer.NewSchemaName();
        _otherSchemas.Add(otherSchema);
        var other = await OpenAsync(schema: otherSchema);
        await mine.AddVersionAsync(new ModelVersionRecord("renewal", "1", "aaaa", T0, Stage.Live), "loader");
        await mine.WritePredictionsAsync([Prediction("renewal", "1", T0)]);

        Assert.Empty(await other.GetVersionsAsync());
        Assert.Equal(0, await other.CountPredictionsAsync("renewal"));
        Assert.Equal(1, await mine.CountPredictionsAsync("renewal"));
    }

    [Theory]
    [InlineData("Scorer")]
    [InlineData("scorer; DROP SCHEMA public")]
    [InlineData("1scorer")]
    [InlineData("")]
    public void A_schema_that_is_not_a_plain_lower_case_identifier_is_refused_naming_it(string schema)
    {
        var error = Assert.Throws<ArgumentException>(() =>
            PostgresScorerStore.ForConnectionString("Host=127.0.0.1;Username=postgres", new PostgresStoreOptions { Schema = schema }));

        Assert.Contains($"'{schema}'", error.Message, StringComparison.Ordinal);
    }

    [Fact]
    public void A_connection_string_npgsql_cannot_read_is_refused_naming_the_connection_string()
    {
        var error = Assert.Throws<ArgumentException>(() => PostgresScorerStore.ForConnectionString("Host=x;Hovercraft=full of eels"));

        Assert.Equal("connectionString", error.ParamName);
    }

    // ---- the change feed and the sweep with transactions in flight -----------------------------------------------

    [Fact]
    public async Task A_change_feed_read_waits_for_an_outcome_write_of_its_model_in_flight_and_then_returns_it()
    {
        var store = await OpenAsync();
        var early = Prediction("renewal", "1", T0);
        await store.WritePredictionsAsync([early]);

        // A writer in another process, as the store writes outcomes: the model's outcome lock, then its row; not committed.
        await using var slow = await PostgresServer.ConnectAsync(_schema);
        await using var inFlight = await slow.BeginTransactionAsync();
        await WriteOutcomeAsync(slow, inFlight, "renewal", early.Id);

        var reading = store.GetLabelledChangesAsync("renewal", "1", 0);
        await WaitUntilAsync(async () => await ScalarAsync<long>(
            "SELECT count(*) FROM pg_locks l JOIN pg_stat_activity a ON a.pid = l.pid "
            + $"WHERE a.application_name = '{_schema}' AND l.locktype = 'advisory' AND NOT l.granted AND l.mode = 'ShareLock'") == 1);
        Assert.False(reading.IsCompleted);

        await inFlight.CommitAsync();

        var changes = await reading;
        Assert.Equal(early.Id, Assert.Single(changes.Points).Id);
        Assert.Empty((await store.GetLabelledChangesAsync("renewal", "1", changes.Cursor)).Points);
    }

    [Fact]
    public async Task A_change_feed_read_returns_a_committed_change_at_once_though_an_older_transaction_of_another_model_is_in_flight()
    {
        var store = await OpenAsync();
        var renewal = Prediction("renewal", "1", T0);
        var claim = Prediction("claims", "1", T0);
        await store.WritePredictionsAsync([renewal, claim]);

        // Another model's outcome write, in flight, with a transaction id below the one about to commit.
        await using var slow = await PostgresServer.ConnectAsync(_schema);
        await using var inFlight = await slow.BeginTransactionAsync();
        await WriteOutcomeAsync(slow, inFlight, "claims", claim.Id);
        var slowXid = await ScalarAsync<long>(slow, inFlight, "SELECT pg_current_xact_id()::text::bigint");

        await store.RecordOutcomesAsync("renewal", [new OutcomeReport(renewal.Id, null, 1)], ConflictPolicy.KeepFirst, T0.AddDays(1));
        var changes = await store.GetLabelledChangesAsync("renewal", "1", 0);

        Assert.Equal(renewal.Id, Assert.Single(changes.Points).Id);
        Assert.True(changes.Cursor > slowXid + 1); // past the other model's transaction still in flight
        await inFlight.CommitAsync();
        Assert.Equal(claim.Id, Assert.Single((await store.GetLabelledChangesAsync("claims", "1", 0)).Points).Id);
        Assert.Empty((await store.GetLabelledChangesAsync("renewal", "1", changes.Cursor)).Points);
    }

    [Fact]
    public async Task The_implicit_negative_sweep_waits_for_a_prediction_batch_in_flight_and_labels_its_rows_too()
    {
        var store = await OpenAsync();

        // A writer in another process, as the store writes: the log's lock shared, a batch number, its row; not committed.
        var pending = Prediction("renewal", "1", T0);
        await using var slow = await PostgresServer.ConnectAsync(_schema);
        await using var inFlight = await slow.BeginTransactionAsync();
        await using (var write = new NpgsqlCommand(
            $"SELECT pg_advisory_xact_lock_shared({PostgresScorerStore.LogLockKey}); "
            + $"INSERT INTO predictions (id, log_seq, model, version, stage, scored_at, eta, probability, features) "
            + $"VALUES ('{pending.Id}', nextval('prediction_batches') * {PostgresScorerStore.RowsPerBatchNumber}, 'renewal', '1', 'live', '{T0:O}', 0.1, 0.5, '{{}}')",
            slow, inFlight))
        {
            await write.ExecuteNonQueryAsync();
        }

        var committed = Prediction("renewal", "1", T0.AddSeconds(1));
        await store.WritePredictionsAsync([committed]); // a later batch number, committed first

        var sweeping = store.RecordImplicitNegativesAsync("renewal", T0.AddDays(1), T0.AddDays(2));
        await WaitUntilAsync(async () => await ScalarAsync<long>(
            "SELECT count(*) FROM pg_locks WHERE locktype = 'advisory' AND NOT granted AND mode = 'ExclusiveLock' AND objsubid = 2 "
            + $"AND classid = {PostgresScorerStore.LogLockClass} AND objid = hashtext('{_schema}')::oid") == 1);
        Assert.False(sweeping.IsCompleted);

        await inFlight.CommitAsync();

        Assert.Equal(2, await sweeping);
        var labelled = await store.GetLabelledAsync("renewal", "1", T0, T0.AddDays(1));
        Assert.Equal([pending.Id, committed.Id], labelled.Select(l => l.Id));
        Assert.All(labelled, l => Assert.True(l.Implicit));
    }

    // ---- outcomes: the SQLite driver's results, and concurrent writers -------------------------------------------

    [Fact]
    public async Task Mixed_batches_of_reports_give_the_receipts_outcomes_and_conflict_rows_the_sqlite_driver_gives()
    {
        using var folder = new TempFolder();
        await using var sqlite = Scorer.Store.Sqlite.SqliteScorerStore.ForFile(Path.Combine(folder.Path, "scorer.db"));
        await sqlite.MigrateAsync();
        var postgres = await OpenAsync();

        // Invented and seeded: live predictions, some with a shadow twin, keys shared by a few rows each.
        var random = new Random(20261202);
        var predictions = new List<PredictionRecord>();
        for (var i = 0; i < 120; i++)
        {
            var live = Prediction("renewal", "1", T0.AddSeconds(i), key: "policy-" + (i % 40).ToString(CultureInfo.InvariantCulture));
            predictions.Add(live);
            if (i % 3 == 0)
            {
                predictions.Add(Prediction("renewal", "2", T0.AddSeconds(i).AddMilliseconds(1)) with { Stage = Stage.Shadow, LiveId = live.Id, Key = null });
            }
        }

        predictions.Add(Prediction("claims", "1", T0, key: "policy-1")); // another model's, never reached from renewal
        foreach (var store in new IScorerStore[] { sqlite, postgres })
        {
            await store.WritePredictionsAsync(predictions);
            Assert.Equal(3, await store.RecordImplicitNegativesAsync("renewal", T0.AddSeconds(2), T0.AddDays(1)));
        }

        for (var round = 0; round < 6; round++)
        {
            var reports = new List<OutcomeReport>();
            for (var k = 0; k < 60; k++)
            {
                var pick = predictions[random.Next(predictions.Count)];
                var outcome = (byte)random.Next(2);
                reports.Add(random.Next(10) switch
                {
                    0 => new OutcomeReport(null, "policy-" + random.Next(45).ToString(CultureInfo.InvariantCulture), outcome),
                    1 => new OutcomeReport(Guid.CreateVersion7(T0), null, outcome), // unknown
                    2 when reports.Count > 0 => reports[random.Next(reports.Count)] with { Outcome = outcome }, // the same prediction again
                    _ => new OutcomeReport(pick.Id, null, outcome, T0.AddDays(round)),
                });
            }

            var policy = round % 2 == 0 ? ConflictPolicy.KeepFirst : ConflictPolicy.TakeLatest;
            var expected = await sqlite.RecordOutcomesAsync("renewal", reports, policy, T0.AddDays(10 + round));
            var actual = await postgres.RecordOutcomesAsync("renewal", reports, policy, T0.AddDays(10 + round));

            Assert.Equal(expected.Accepted, actual.Accepted);
            Assert.Equal(expected.Duplicates, actual.Duplicates);
            Assert.Equal(expected.Unknown, actual.Unknown);
            Assert.Equal(expected.Conflicts, actual.Conflicts);
        }

        Assert.Equal(await sqlite.GetLabelledAsync("renewal", null, T0, T0.AddDays(1)), await postgres.GetLabelledAsync("renewal", null, T0, T0.AddDays(1)));
        Assert.Equal(await sqlite.GetPairedAsync("renewal", "1", "2", T0, T0.AddDays(1)), await postgres.GetPairedAsync("renewal", "1", "2", T0, T0.AddDays(1)));

        await using var file = await sqlite.OpenAsync(CancellationToken.None);
        using var command = file.CreateCommand();
        command.CommandText = "SELECT hex(prediction_id), recorded, reported, kept, was_implicit FROM outcome_conflicts ORDER BY id;";
        var sqliteConflicts = new List<string>();
        using (var reader = command.ExecuteReader())
        {
            while (reader.Read())
            {
                sqliteConflicts.Add($"{reader.GetString(0)} {reader.GetInt64(1)} {reader.GetInt64(2)} {reader.GetInt64(3)} {reader.GetInt64(4) == 1}");
            }
        }

        var postgresConflicts = await QueryAsync(
            "SELECT upper(replace(prediction_id::text, '-', '')), recorded, reported, kept, was_implicit FROM outcome_conflicts ORDER BY id",
            r => $"{r.GetString(0)} {r.GetInt16(1)} {r.GetInt16(2)} {r.GetInt16(3)} {r.GetBoolean(4)}");
        Assert.NotEmpty(sqliteConflicts);
        Assert.Equal(sqliteConflicts.Order(StringComparer.Ordinal), postgresConflicts.Order(StringComparer.Ordinal));
    }

    [Fact]
    public async Task Two_replicas_reporting_different_outcomes_for_the_same_predictions_at_once_label_each_once_and_record_every_conflict()
    {
        var a = await OpenAsync();
        var b = await OpenAsync();
        var predictions = Enumerable.Range(0, 400).Select(i => Prediction("renewal", "1", T0.AddSeconds(i))).ToArray();
        await a.WritePredictionsAsync(predictions);

        async Task<List<OutcomeReceipt>> ReportAsync(IScorerStore store, byte outcome)
        {
            var receipts = new List<OutcomeReceipt>();
            foreach (var chunk in predictions.Chunk(40))
            {
                receipts.Add(await store.RecordOutcomesAsync("renewal", [.. chunk.Select(p => new OutcomeReport(p.Id, null, outcome))], ConflictPolicy.KeepFirst, T0.AddDays(1)));
            }

            return receipts;
        }

        var both = await Task.WhenAll(Task.Run(() => ReportAsync(a, 1)), Task.Run(() => ReportAsync(b, 0)));

        var receipts = both.SelectMany(r => r).ToArray();
        Assert.Equal(predictions.Length, receipts.Sum(r => r.Accepted));
        Assert.Equal(predictions.Length, receipts.Sum(r => r.Conflicts.Count));
        Assert.Equal(0, receipts.Sum(r => r.Duplicates));
        Assert.Equal(predictions.Length, (await a.GetLabelledAsync("renewal", "1", T0, T0.AddDays(1))).Count);
        Assert.Equal((long)predictions.Length, await ScalarAsync<long>("SELECT count(*) FROM outcome_conflicts"));
    }

    // ---- leases --------------------------------------------------------------------------------------------------

    [Fact]
    public async Task A_lease_one_replica_holds_is_refused_to_another_until_released()
    {
        var first = await OpenAsync();
        var second = await OpenAsync();

        Assert.True(await first.TryHoldLeaseAsync("charts"));
        Assert.True(await first.TryHoldLeaseAsync("charts")); // confirmed
        Assert.False(await second.TryHoldLeaseAsync("charts"));
        await Assert.ThrowsAsync<LeaseLostException>(() => second.SaveChartStateAsync("renewal", "1", "{\"by\":\"second\"}", "charts"));
        Assert.True(await second.TryHoldLeaseAsync("other-work")); // leases are by name

        await first.ReleaseLeaseAsync("charts");

        Assert.True(await second.TryHoldLeaseAsync("charts"));
        await second.SaveChartStateAsync("renewal", "1", "{\"by\":\"second\"}", "charts");
        Assert.False(await first.TryHoldLeaseAsync("charts"));
        Assert.Equal("{\"by\":\"second\"}", await first.GetChartStateAsync("renewal", "1"));
    }

    [Fact]
    public async Task A_lease_whose_holders_session_ends_passes_to_the_next_replica_and_the_old_holder_can_no_longer_save()
    {
        var holder = await OpenAsync();
        var next = await OpenAsync();
        Assert.True(await holder.TryHoldLeaseAsync("charts"));
        await holder.SaveChartStateAsync("renewal", "1", "{\"steps\":1}", "charts");

        // The holder's session dies (as when its process or its network does).
        Assert.True(await ScalarAsync<bool>(
            "SELECT bool_and(pg_terminate_backend(pid)) FROM pg_locks WHERE locktype = 'advisory' AND granted AND objsubid = 2 "
            + $"AND classid = {PostgresScorerStore.LeaseLockClass} AND objid = hashtext('{_schema}.charts')::oid"));
        await WaitUntilAsync(async () => await next.TryHoldLeaseAsync("charts"));

        await Assert.ThrowsAsync<LeaseLostException>(() => holder.SaveChartStateAsync("renewal", "1", "{\"steps\":99}", "charts"));
        Assert.False(await holder.TryHoldLeaseAsync("charts"));
        await next.SaveChartStateAsync("renewal", "1", "{\"steps\":2}", "charts");
        Assert.Equal("{\"steps\":2}", await holder.GetChartStateAsync("renewal", "1"));
    }

    // ---- retention -----------------------------------------------------------------------------------------------

    [Theory]
    [InlineData(0)]
    [InlineData(-1)]
    public void A_retention_that_is_not_positive_is_refused_naming_it(int days)
    {
        var error = Assert.Throws<ArgumentException>(() => PostgresScorerStore.ForConnectionString(
            "Host=127.0.0.1;Username=postgres", new PostgresStoreOptions { PredictionRetention = TimeSpan.FromDays(days) }));

        Assert.Contains("PredictionRetention", error.Message, StringComparison.Ordinal);
    }

    // ---- helpers -------------------------------------------------------------------------------------------------

    private async Task<PostgresScorerStore> OpenAsync(TimeProvider? clock = null, bool migrate = true, string? schema = null, PostgresStoreOptions? options = null)
    {
        // Named after the test's schema, so that the test can tell its own sessions from those of tests running beside it.
        var connectionString = new NpgsqlConnectionStringBuilder(await PostgresServer.ConnectionStringAsync()) { ApplicationName = _schema }.ConnectionString;
        var store = PostgresScorerStore.ForConnectionString(connectionString, (options ?? new PostgresStoreOptions()) with { Schema = schema ?? _schema }, clock);
        _opened.Add(store);
        if (migrate)
        {
            await store.MigrateAsync();
        }

        return store;
    }

    /// <summary>Writes an outcome row as the store's writers do: the model's outcome lock first, then the row.</summary>
    private static async Task WriteOutcomeAsync(NpgsqlConnection connection, NpgsqlTransaction transaction, string model, Guid id)
    {
        await using var write = new NpgsqlBatch(connection, transaction)
        {
            BatchCommands =
            {
                new NpgsqlBatchCommand($"SELECT pg_advisory_xact_lock({PostgresScorerStore.OutcomeLockClass}, hashtext(current_schema() || '.' || $1))")
                {
                    Parameters = { new NpgsqlParameter<string> { TypedValue = model } },
                },
                new NpgsqlBatchCommand(
                    "INSERT INTO outcomes (prediction_id, model, version, stage, scored_at, eta, probability, outcome, recorded_at, implicit) "
                    + "SELECT id, model, version, stage, scored_at, eta, probability, 0, now(), false FROM predictions WHERE id = $1")
                {
                    Parameters = { new NpgsqlParameter<Guid> { TypedValue = id } },
                },
            },
        };
        await write.ExecuteNonQueryAsync();
    }

    private static PredictionRecord Prediction(string model, string version, DateTimeOffset scoredAt, string? key = "policy-1") =>
        new(Guid.CreateVersion7(scoredAt), model, version, Stage.Live, scoredAt, key, -1.25, 0.2227001388253309, "{\"age\":41}");

    /// <summary>This test's store sessions waiting for the 64-bit advisory lock <paramref name="key"/> (pg_locks splits it into classid and objid).</summary>
    private Task<long> WaitersForAsync(long key) => ScalarAsync<long>(
        "SELECT count(*) FROM pg_locks l JOIN pg_stat_activity a ON a.pid = l.pid "
        + $"WHERE a.application_name = '{_schema}' AND l.locktype = 'advisory' AND NOT l.granted AND l.objsubid = 1 AND l.classid = {key >> 32} AND l.objid = {key & 0xFFFF_FFFF}");

    /// <summary>Polls until the condition holds; fails after 30 s (a bound on a hang, not a timing assertion).</summary>
    private static async Task WaitUntilAsync(Func<Task<bool>> condition)
    {
        var deadline = DateTime.UtcNow.AddSeconds(30);
        while (!await condition())
        {
            Assert.True(DateTime.UtcNow < deadline, "The condition did not come true within 30 s.");
            await Task.Delay(20);
        }
    }

    private async Task ExecuteAsync(string sql)
    {
        await using var connection = await PostgresServer.ConnectAsync(_schema);
        await using var command = new NpgsqlCommand(sql, connection);
        await command.ExecuteNonQueryAsync();
    }

    private async Task<T> ScalarAsync<T>(string sql)
    {
        await using var connection = await PostgresServer.ConnectAsync(_schema);
        return await ScalarAsync<T>(connection, null, sql);
    }

    private static async Task<T> ScalarAsync<T>(NpgsqlConnection connection, NpgsqlTransaction? transaction, string sql)
    {
        await using var command = new NpgsqlCommand(sql, connection, transaction);
        return (T)(await command.ExecuteScalarAsync())!;
    }

    private async Task<List<T>> QueryAsync<T>(string sql, Func<NpgsqlDataReader, T> read, params string[] parameters)
    {
        await using var connection = await PostgresServer.ConnectAsync(_schema);
        await using var command = new NpgsqlCommand(sql, connection);
        foreach (var p in parameters)
        {
            command.Parameters.Add(new NpgsqlParameter<string> { TypedValue = p });
        }

        await using var reader = await command.ExecuteReaderAsync();
        var rows = new List<T>();
        while (await reader.ReadAsync())
        {
            rows.Add(read(reader));
        }

        return rows;
    }
}
