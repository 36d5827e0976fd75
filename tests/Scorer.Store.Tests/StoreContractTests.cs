using System.Diagnostics;
using System.Globalization;
using Xunit.Abstractions;

namespace Scorer.Store.Tests;

/// <summary>
/// What every <see cref="IScorerStore"/> must do. A driver's test class derives from this one and says how to open a
/// store over storage of its own; nothing here knows which database is underneath.
/// </summary>
/// <remarks>
/// Behaviour these tests define beyond the interface's comments: a stage change naming an unknown (model, version),
/// or whose From is given and differs from the stored stage, throws <see cref="InvalidOperationException"/> naming the
/// version and changes nothing; a change whose From is null applies from the stored stage, and the history records
/// that stage as its From. A NaN or infinite eta or probability throws <see cref="ArgumentException"/> naming the
/// field; a prediction id repeated in a batch or already stored throws <see cref="PredictionRefusedException"/> naming
/// the id; either way the batch writes nothing. Stores return times in UTC (offset zero). After disposal, calls throw
/// <see cref="ObjectDisposedException"/>.
/// </remarks>
public abstract partial class StoreContractTests : IAsyncLifetime
{
    protected const string Renewal = "renewal";
    protected const string Claims = "claims";

    /// <summary>An invented feature row: accents, CJK, an emoji, escapes and numbers, to come back character for character.</summary>
    protected const string UnicodeFeatures =
        "{\"région\":\"Île-de-France\",\"城市\":\"東京\",\"vehicle\":\"🚗 estate\",\"note\":\"line\\nbreak \\u00e9\",\"premium\":1234.5,\"age\":-0.0}";

    /// <summary>An invented instant, on a whole millisecond.</summary>
    protected static readonly DateTimeOffset T0 = new(2025, 3, 14, 9, 26, 53, 589, TimeSpan.Zero);

    private readonly List<IScorerStore> _opened = [];

    protected StoreContractTests(ITestOutputHelper? output = null)
    {
        Output = output;
    }

    protected ITestOutputHelper? Output { get; }

    /// <summary>
    /// The precision to which the store keeps times; they come back within it, and exactly when they are whole
    /// multiples of it since the Unix epoch. The contract asks for at least a millisecond.
    /// </summary>
    protected virtual TimeSpan TimePrecision => TimeSpan.FromMilliseconds(1);

    /// <summary>
    /// Opens a new store instance over this test's storage: empty at the first call of a test, the same storage at
    /// every later call of that test (so a second call is "another process" or "after a restart"). Not yet migrated.
    /// </summary>
    protected abstract Task<IScorerStore> CreateStoreAsync();

    /// <summary>Removes this test's storage, after every store the test opened has been disposed.</summary>
    protected virtual Task DeleteStorageAsync() => Task.CompletedTask;

    public Task InitializeAsync() => Task.CompletedTask;

    public async Task DisposeAsync()
    {
        foreach (var store in _opened)
        {
            await store.DisposeAsync();
        }

        await DeleteStorageAsync();
    }

    // ---- migrations ----------------------------------------------------------------------------------------------

    [Fact]
    public async Task A_new_store_knows_no_versions_history_or_predictions()
    {
        var store = await OpenAsync();

        Assert.Empty(await store.GetVersionsAsync());
        Assert.Empty(await store.GetHistoryAsync(Renewal));
        Assert.Equal(0, await store.CountPredictionsAsync(Renewal));
        Assert.Null(await store.GetPredictionAsync(Guid.NewGuid()));
    }

    [Fact]
    public async Task Migrating_twice_is_harmless_and_keeps_the_data()
    {
        var store = await OpenAsync();
        await store.AddVersionAsync(Version(Renewal, "1", Stage.Live), "loader");
        await store.WritePredictionsAsync([Prediction(Renewal, "1", T0)]);

        await store.MigrateAsync();
        await store.MigrateAsync();

        Assert.Single(await store.GetVersionsAsync());
        Assert.Single(await store.GetHistoryAsync(Renewal));
        Assert.Equal(1, await store.CountPredictionsAsync(Renewal));
    }

    [Fact]
    public async Task A_second_store_on_the_same_storage_migrates_cleanly_and_sees_the_first_ones_data()
    {
        var first = await OpenAsync();
        await first.AddVersionAsync(Version(Renewal, "1", Stage.Live), "loader");
        await first.WritePredictionsAsync([Prediction(Renewal, "1", T0)]);

        var second = await OpenAsync();

        Assert.Equal(await first.GetVersionsAsync(), await second.GetVersionsAsync());
        Assert.Equal(1, await second.CountPredictionsAsync(Renewal));
        await second.WritePredictionsAsync([Prediction(Renewal, "1", T0.AddSeconds(1))]);
        Assert.Equal(2, await first.CountPredictionsAsync(Renewal));
    }

    [Fact]
    public async Task Two_stores_migrating_fresh_storage_at_the_same_moment_both_succeed()
    {
        var first = await CreateTrackedAsync();
        var second = await CreateTrackedAsync();

        await Task.WhenAll(Task.Run(() => first.MigrateAsync()), Task.Run(() => second.MigrateAsync()));

        await first.AddVersionAsync(Version(Renewal, "1", Stage.Live), "loader");
        Assert.Single(await second.GetVersionsAsync());
    }

    // ---- versions ------------------------------------------------------------------------------------------------

    [Fact]
    public async Task Adding_a_version_stores_it_and_records_its_first_stage_with_no_from_stage()
    {
        var store = await OpenAsync();
        var version = Version(Renewal, "2025.03.1", Stage.Shadow, "9f2c4e", T0);

        var stored = await store.AddVersionAsync(version, "loader");

        Assert.Equal(version, stored);
        Assert.Equal([version], await store.GetVersionsAsync());
        Assert.Equal(
            [new StageChange(Renewal, "2025.03.1", null, Stage.Shadow, "loader", T0)],
            await store.GetHistoryAsync(Renewal));
    }

    [Fact]
    public async Task Adding_a_known_version_again_returns_the_first_record_keeps_its_stage_and_adds_no_history()
    {
        var store = await OpenAsync();
        var first = Version(Renewal, "1", Stage.Shadow, "aaaa", T0);
        await store.AddVersionAsync(first, "loader");

        var again = await store.AddVersionAsync(Version(Renewal, "1", Stage.Live, "bbbb", T0.AddHours(1)), "someone-else");

        Assert.Equal(first, again);
        Assert.Equal([first], await store.GetVersionsAsync());
        Assert.Single(await store.GetHistoryAsync(Renewal));
    }

    [Fact]
    public async Task Adding_a_version_again_after_a_stage_change_returns_the_changed_stage()
    {
        var store = await OpenAsync();
        await store.AddVersionAsync(Version(Renewal, "1", Stage.Shadow), "loader");
        await store.ChangeStagesAsync([new StageChange(Renewal, "1", Stage.Shadow, Stage.Live, "ana", T0.AddMinutes(5))]);

        var again = await store.AddVersionAsync(Version(Renewal, "1", Stage.Shadow), "loader");

        Assert.Equal(Stage.Live, again.Stage);
    }

    [Fact]
    public async Task The_same_version_name_under_two_models_is_two_versions()
    {
        var store = await OpenAsync();
        var renewal = Version(Renewal, "1", Stage.Live, "aaaa");
        var claims = Version(Claims, "1", Stage.Shadow, "bbbb");

        await store.AddVersionAsync(renewal, "loader");
        await store.AddVersionAsync(claims, "loader");
        await store.ChangeStagesAsync([new StageChange(Claims, "1", Stage.Shadow, Stage.Retired, "ana", T0.AddMinutes(1))]);

        var versions = Sorted(await store.GetVersionsAsync());
        Assert.Equal([claims with { Stage = Stage.Retired }, renewal], versions);
        Assert.Single(await store.GetHistoryAsync(Renewal));
        Assert.Equal(2, (await store.GetHistoryAsync(Claims)).Count);
    }

    [Fact]
    public async Task Many_callers_adding_the_same_version_at_once_get_one_record_and_one_history_entry()
    {
        var store = await OpenAsync();
        var stages = new[] { Stage.Live, Stage.Shadow, Stage.Retired, Stage.Live, Stage.Shadow, Stage.Retired, Stage.Live, Stage.Shadow };

        var results = await Task.WhenAll(stages.Select(
            (stage, i) => Task.Run(() => store.AddVersionAsync(Version(Renewal, "1", stage, "hash" + i), "loader-" + i))));

        var stored = Assert.Single(await store.GetVersionsAsync());
        Assert.All(results, r => Assert.Equal(stored, r));
        var entry = Assert.Single(await store.GetHistoryAsync(Renewal));
        Assert.Equal(stored.Stage, entry.To);
    }

    // ---- stage changes and history -------------------------------------------------------------------------------

    [Fact]
    public async Task Stage_changes_apply_and_the_history_lists_every_change_in_the_order_made()
    {
        var store = await OpenAsync();
        await store.AddVersionAsync(Version(Renewal, "1", Stage.Shadow, "aaaa", T0), "loader");
        await store.ChangeStagesAsync([new StageChange(Renewal, "1", Stage.Shadow, Stage.Live, "ana", T0.AddMinutes(1))]);
        await store.AddVersionAsync(Version(Renewal, "2", Stage.Shadow, "bbbb", T0.AddMinutes(2)), "loader");

        // A promotion: the old live version retires and the shadow goes live, in one batch.
        await store.ChangeStagesAsync(
        [
            new StageChange(Renewal, "1", Stage.Live, Stage.Retired, "ben", T0.AddMinutes(3)),
            new StageChange(Renewal, "2", Stage.Shadow, Stage.Live, "ben", T0.AddMinutes(3)),
        ]);

        Assert.Equal(
            [
                Version(Renewal, "1", Stage.Retired, "aaaa", T0),
                Version(Renewal, "2", Stage.Live, "bbbb", T0.AddMinutes(2)),
            ],
            Sorted(await store.GetVersionsAsync()));
        Assert.Equal(
            [
                new StageChange(Renewal, "1", null, Stage.Shadow, "loader", T0),
                new StageChange(Renewal, "1", Stage.Shadow, Stage.Live, "ana", T0.AddMinutes(1)),
                new StageChange(Renewal, "2", null, Stage.Shadow, "loader", T0.AddMinutes(2)),
                new StageChange(Renewal, "1", Stage.Live, Stage.Retired, "ben", T0.AddMinutes(3)),
                new StageChange(Renewal, "2", Stage.Shadow, Stage.Live, "ben", T0.AddMinutes(3)),
            ],
            await store.GetHistoryAsync(Renewal));
    }

    [Fact]
    public async Task History_is_in_the_order_made_even_when_the_callers_clock_went_backwards()
    {
        var store = await OpenAsync();
        await store.AddVersionAsync(Version(Renewal, "1", Stage.Shadow, "aaaa", T0), "loader");
        await store.ChangeStagesAsync([new StageChange(Renewal, "1", Stage.Shadow, Stage.Live, "ana", T0.AddMinutes(-10))]);
        await store.ChangeStagesAsync([new StageChange(Renewal, "1", Stage.Live, Stage.Retired, "ana", T0.AddMinutes(-20))]);

        var history = await store.GetHistoryAsync(Renewal);

        Assert.Equal([Stage.Shadow, Stage.Live, Stage.Retired], history.Select(h => h.To));
    }

    [Fact]
    public async Task The_history_of_a_model_leaves_out_other_models()
    {
        var store = await OpenAsync();
        await store.AddVersionAsync(Version(Renewal, "1", Stage.Live), "loader");
        await store.AddVersionAsync(Version(Claims, "1", Stage.Live), "loader");

        var history = await store.GetHistoryAsync(Claims);

        Assert.Equal(Claims, Assert.Single(history).Model);
        Assert.Empty(await store.GetHistoryAsync("no-such-model"));
    }

    [Fact]
    public async Task Changes_in_one_batch_to_the_same_version_apply_in_order()
    {
        var store = await OpenAsync();
        await store.AddVersionAsync(Version(Renewal, "1", Stage.Shadow), "loader");

        await store.ChangeStagesAsync(
        [
            new StageChange(Renewal, "1", Stage.Shadow, Stage.Live, "ana", T0.AddMinutes(1)),
            new StageChange(Renewal, "1", Stage.Live, Stage.Retired, "ana", T0.AddMinutes(2)),
        ]);

        Assert.Equal(Stage.Retired, Assert.Single(await store.GetVersionsAsync()).Stage);
        Assert.Equal([Stage.Shadow, Stage.Live, Stage.Retired], (await store.GetHistoryAsync(Renewal)).Select(h => h.To));
    }

    [Fact]
    public async Task A_batch_of_stage_changes_naming_an_unknown_version_fails_naming_it_and_changes_nothing()
    {
        var store = await OpenAsync();
        await store.AddVersionAsync(Version(Renewal, "1", Stage.Shadow), "loader");
        await store.AddVersionAsync(Version(Renewal, "2", Stage.Live), "loader");
        var versionsBefore = Sorted(await store.GetVersionsAsync());
        var historyBefore = await store.GetHistoryAsync(Renewal);

        var error = await Assert.ThrowsAsync<InvalidOperationException>(() => store.ChangeStagesAsync(
        [
            new StageChange(Renewal, "1", Stage.Shadow, Stage.Live, "ana", T0.AddMinutes(1)),
            new StageChange(Renewal, "2", Stage.Live, Stage.Retired, "ana", T0.AddMinutes(1)),
            new StageChange(Renewal, "7.3-missing", Stage.Shadow, Stage.Live, "ana", T0.AddMinutes(1)),
        ]));

        Assert.Contains(Renewal, error.Message, StringComparison.Ordinal);
        Assert.Contains("7.3-missing", error.Message, StringComparison.Ordinal);
        Assert.Equal(versionsBefore, Sorted(await store.GetVersionsAsync()));
        Assert.Equal(historyBefore, await store.GetHistoryAsync(Renewal));
    }

    [Fact]
    public async Task A_stage_change_expecting_a_stage_the_version_does_not_have_fails_and_changes_nothing()
    {
        var store = await OpenAsync();
        await store.AddVersionAsync(Version(Renewal, "2025.03.1", Stage.Shadow), "loader");
        await store.AddVersionAsync(Version(Renewal, "2025.04.2", Stage.Shadow), "loader");

        var error = await Assert.ThrowsAsync<InvalidOperationException>(() => store.ChangeStagesAsync(
        [
            new StageChange(Renewal, "2025.03.1", Stage.Shadow, Stage.Live, "ana", T0.AddMinutes(1)),
            new StageChange(Renewal, "2025.04.2", Stage.Live, Stage.Retired, "ana", T0.AddMinutes(1)),
        ]));

        Assert.Contains("2025.04.2", error.Message, StringComparison.Ordinal);
        Assert.All(await store.GetVersionsAsync(), v => Assert.Equal(Stage.Shadow, v.Stage));
        Assert.Equal(2, (await store.GetHistoryAsync(Renewal)).Count);
    }

    [Fact]
    public async Task A_stage_change_with_no_from_stage_applies_and_the_history_records_the_stage_it_left()
    {
        var store = await OpenAsync();
        await store.AddVersionAsync(Version(Renewal, "1", Stage.Shadow), "loader");

        await store.ChangeStagesAsync([new StageChange(Renewal, "1", null, Stage.Retired, "ana", T0.AddMinutes(1))]);

        Assert.Equal(Stage.Retired, Assert.Single(await store.GetVersionsAsync()).Stage);
        Assert.Equal(
            new StageChange(Renewal, "1", Stage.Shadow, Stage.Retired, "ana", T0.AddMinutes(1)),
            (await store.GetHistoryAsync(Renewal))[^1]);
    }

    [Fact]
    public async Task An_empty_batch_of_stage_changes_changes_nothing()
    {
        var store = await OpenAsync();
        await store.AddVersionAsync(Version(Renewal, "1", Stage.Shadow), "loader");

        await store.ChangeStagesAsync([]);

        Assert.Equal(Stage.Shadow, Assert.Single(await store.GetVersionsAsync()).Stage);
        Assert.Single(await store.GetHistoryAsync(Renewal));
    }

    // ---- predictions ---------------------------------------------------------------------------------------------

    [Fact]
    public async Task Predictions_round_trip_exactly_doubles_bit_for_bit_null_keys_and_unicode_features()
    {
        var store = await OpenAsync();
        (double Eta, double Probability)[] values =
        [
            (-0.0, 0.5),
            (double.Epsilon, Math.BitIncrement(0.5)),
            (0.1 + 0.2, Math.BitDecrement(1.0)),
            (-745.1332191019411, double.Epsilon),
            (double.MaxValue, 1.0),
            (double.MinValue, 0.0),
            (-1e-300, 2.2250738585072014E-308),
            (Math.PI, 1.0 / 3.0),
            (36.04365338911715, 0.9999999999999998),
            (3.0, 0.9525741268224334),
        ];
        var rows = values.Select((v, i) => new PredictionRecord(
            Guid.NewGuid(),
            Renewal,
            "2025.03.1",
            i % 2 == 0 ? Stage.Live : Stage.Shadow,
            Aligned(T0.AddMinutes(i)),
            i % 3 == 0 ? null : "policy-" + i.ToString(CultureInfo.InvariantCulture) + "-ü",
            v.Eta,
            v.Probability,
            UnicodeFeatures)).ToArray();

        await store.WritePredictionsAsync(rows);

        foreach (var row in rows)
        {
            var back = await store.GetPredictionAsync(row.Id);
            Assert.NotNull(back);
            AssertSame(row, back);
        }

        var listed = await store.GetPredictionsAsync(Renewal, null, T0, T0.AddHours(1));
        Assert.Equal(rows.Length, listed.Count);
        foreach (var (expected, actual) in rows.Zip(listed))
        {
            AssertSame(expected, actual);
        }
    }

    [Fact]
    public async Task Times_come_back_as_the_same_instant_in_utc_whatever_offset_they_were_given()
    {
        var store = await OpenAsync();
        var scoredAt = Aligned(new DateTimeOffset(2025, 6, 30, 23, 59, 59, 123, TimeSpan.FromHours(-7)));
        var loadedAt = Aligned(new DateTimeOffset(2025, 6, 1, 8, 0, 0, 1, TimeSpan.FromHours(5.5)));
        var row = Prediction(Renewal, "1", scoredAt);
        await store.AddVersionAsync(Version(Renewal, "1", Stage.Live, "aaaa", loadedAt), "loader");
        await store.WritePredictionsAsync([row]);

        var back = await store.GetPredictionAsync(row.Id);
        var version = Assert.Single(await store.GetVersionsAsync());
        var history = Assert.Single(await store.GetHistoryAsync(Renewal));

        Assert.Equal(scoredAt, back!.ScoredAt);
        Assert.Equal(TimeSpan.Zero, back.ScoredAt.Offset);
        Assert.Equal(loadedAt, version.LoadedAt);
        Assert.Equal(TimeSpan.Zero, version.LoadedAt.Offset);
        Assert.Equal(loadedAt, history.At);
        Assert.Equal(TimeSpan.Zero, history.At.Offset);
    }

    [Fact]
    public async Task A_time_finer_than_the_stored_precision_comes_back_within_that_precision()
    {
        var store = await OpenAsync();
        var scoredAt = T0.AddTicks(TimePrecision.Ticks - 3);
        var row = Prediction(Renewal, "1", scoredAt);

        await store.WritePredictionsAsync([row]);

        var back = await store.GetPredictionAsync(row.Id);
        Assert.True(
            (back!.ScoredAt - scoredAt).Duration() < TimePrecision,
            $"{back.ScoredAt:O} is not within {TimePrecision} of {scoredAt:O}");
    }

    [Fact]
    public async Task An_unknown_prediction_id_finds_nothing()
    {
        var store = await OpenAsync();
        await store.WritePredictionsAsync([Prediction(Renewal, "1", T0)]);

        Assert.Null(await store.GetPredictionAsync(Guid.NewGuid()));
    }

    [Fact]
    public async Task A_prediction_id_repeated_within_a_batch_fails_the_whole_batch_naming_it_and_writes_none_of_it()
    {
        var store = await OpenAsync();
        var rows = Enumerable.Range(0, 10).Select(i => Prediction(Renewal, "1", T0.AddSeconds(i))).ToArray();
        rows[7] = rows[7] with { Id = rows[2].Id };

        var error = await Assert.ThrowsAsync<PredictionRefusedException>(() => store.WritePredictionsAsync(rows));

        Assert.Contains(rows[2].Id.ToString(), error.Message, StringComparison.OrdinalIgnoreCase);
        Assert.Equal(0, await store.CountPredictionsAsync(Renewal));
        Assert.Null(await store.GetPredictionAsync(rows[0].Id));
        Assert.Null(await store.GetPredictionAsync(rows[2].Id));
    }

    [Fact]
    public async Task A_batch_holding_an_id_already_stored_fails_whole_and_leaves_the_stored_prediction_as_it_was()
    {
        var store = await OpenAsync();
        var first = Enumerable.Range(0, 5).Select(i => Prediction(Renewal, "1", T0.AddSeconds(i))).ToArray();
        await store.WritePredictionsAsync(first);
        var second = Enumerable.Range(0, 5).Select(i => Prediction(Renewal, "2", T0.AddMinutes(1).AddSeconds(i))).ToArray();
        second[4] = second[4] with { Id = first[1].Id };

        var error = await Assert.ThrowsAsync<PredictionRefusedException>(() => store.WritePredictionsAsync(second));

        Assert.Contains(first[1].Id.ToString(), error.Message, StringComparison.OrdinalIgnoreCase);
        Assert.Equal(5, await store.CountPredictionsAsync(Renewal));
        Assert.Equal(0, await store.CountPredictionsAsync(Renewal, "2"));
        AssertSame(first[1], (await store.GetPredictionAsync(first[1].Id))!);
    }

    public static TheoryData<string, double> NonFiniteValues => new()
    {
        { "Eta", double.NaN },
        { "Eta", double.PositiveInfinity },
        { "Eta", double.NegativeInfinity },
        { "Probability", double.NaN },
        { "Probability", double.PositiveInfinity },
        { "Probability", double.NegativeInfinity },
    };

    [Theory]
    [MemberData(nameof(NonFiniteValues))]
    public async Task A_non_finite_eta_or_probability_is_refused_naming_the_field_and_the_batch_writes_nothing(string field, double value)
    {
        var store = await OpenAsync();
        var rows = Enumerable.Range(0, 6).Select(i => Prediction(Renewal, "1", T0.AddSeconds(i))).ToArray();
        rows[3] = field == "Eta" ? rows[3] with { Eta = value } : rows[3] with { Probability = value };

        var error = await Assert.ThrowsAnyAsync<ArgumentException>(() => store.WritePredictionsAsync(rows));

        Assert.Contains(field, error.Message, StringComparison.Ordinal);
        Assert.Equal(0, await store.CountPredictionsAsync(Renewal));
    }

    [Fact]
    public async Task An_empty_batch_of_predictions_writes_nothing_and_does_not_fail()
    {
        var store = await OpenAsync();

        await store.WritePredictionsAsync([]);

        Assert.Equal(0, await store.CountPredictionsAsync(Renewal));
    }

    [Fact]
    public async Task A_range_query_includes_its_start_excludes_its_end_and_returns_predictions_in_time_order()
    {
        var store = await OpenAsync();
        var rows = Enumerable.Range(0, 10).Select(i => Prediction(Renewal, "1", T0.AddSeconds(i))).ToArray();
        var others = Enumerable.Range(0, 10).Select(i => Prediction(Claims, "1", T0.AddSeconds(i))).ToArray();

        // Written out of time order, over several batches.
        await store.WritePredictionsAsync([rows[7], rows[2], rows[9], others[3]]);
        await store.WritePredictionsAsync([rows[4], rows[0], rows[3], others[4]]);
        await store.WritePredictionsAsync([rows[8], rows[1], rows[5], rows[6], others[5]]);

        var found = await store.GetPredictionsAsync(Renewal, "1", T0.AddSeconds(3), T0.AddSeconds(6));

        Assert.Equal([rows[3].Id, rows[4].Id, rows[5].Id], found.Select(p => p.Id));
    }

    [Fact]
    public async Task A_range_query_without_a_version_returns_every_version_of_the_model_interleaved_by_time()
    {
        var store = await OpenAsync();
        var v1 = Enumerable.Range(0, 5).Select(i => Prediction(Renewal, "1", T0.AddSeconds(2 * i))).ToArray();
        var v2 = Enumerable.Range(0, 5).Select(i => Prediction(Renewal, "2", T0.AddSeconds((2 * i) + 1))).ToArray();
        await store.WritePredictionsAsync(v2);
        await store.WritePredictionsAsync(v1);
        await store.WritePredictionsAsync([Prediction(Claims, "1", T0.AddSeconds(4))]);

        var all = await store.GetPredictionsAsync(Renewal, null, T0, T0.AddSeconds(10));
        var onlyV2 = await store.GetPredictionsAsync(Renewal, "2", T0, T0.AddSeconds(10));

        Assert.Equal(
            [v1[0].Id, v2[0].Id, v1[1].Id, v2[1].Id, v1[2].Id, v2[2].Id, v1[3].Id, v2[3].Id, v1[4].Id, v2[4].Id],
            all.Select(p => p.Id));
        Assert.Equal(v2.Select(p => p.Id), onlyV2.Select(p => p.Id));
    }

    [Fact]
    public async Task A_range_whose_end_is_not_after_its_start_is_empty()
    {
        var store = await OpenAsync();
        await store.WritePredictionsAsync([Prediction(Renewal, "1", T0)]);

        Assert.Empty(await store.GetPredictionsAsync(Renewal, null, T0, T0));
        Assert.Empty(await store.GetPredictionsAsync(Renewal, null, T0.AddSeconds(1), T0));
        Assert.Single(await store.GetPredictionsAsync(Renewal, null, T0, T0.Add(TimePrecision)));
    }

    [Fact]
    public async Task Counts_are_per_model_and_optionally_per_version()
    {
        var store = await OpenAsync();
        await store.WritePredictionsAsync(Enumerable.Range(0, 10).Select(i => Prediction(Renewal, "1", T0.AddSeconds(i))).ToArray());
        await store.WritePredictionsAsync(Enumerable.Range(0, 4).Select(i => Prediction(Renewal, "2", T0.AddSeconds(i))).ToArray());
        await store.WritePredictionsAsync(Enumerable.Range(0, 3).Select(i => Prediction(Claims, "1", T0.AddSeconds(i))).ToArray());

        Assert.Equal(14, await store.CountPredictionsAsync(Renewal));
        Assert.Equal(10, await store.CountPredictionsAsync(Renewal, "1"));
        Assert.Equal(4, await store.CountPredictionsAsync(Renewal, "2"));
        Assert.Equal(3, await store.CountPredictionsAsync(Claims));
        Assert.Equal(3, await store.CountPredictionsAsync(Claims, "1"));
        Assert.Equal(0, await store.CountPredictionsAsync(Claims, "2"));
        Assert.Equal(0, await store.CountPredictionsAsync("no-such-model"));
    }

    // ---- concurrency, durability, volume -------------------------------------------------------------------------

    [Fact]
    public async Task Concurrent_writers_lose_nothing()
    {
        const int Writers = 4;
        const int BatchesEach = 50;
        const int RowsPerBatch = 20;
        var store = await OpenAsync();
        var written = new PredictionRecord[Writers][];

        await Task.WhenAll(Enumerable.Range(0, Writers).Select(w => Task.Run(async () =>
        {
            var version = "w" + w.ToString(CultureInfo.InvariantCulture);
            var mine = new List<PredictionRecord>();
            for (var b = 0; b < BatchesEach; b++)
            {
                var batch = Enumerable.Range(0, RowsPerBatch)
                    .Select(r => Prediction(Renewal, version, T0.AddMilliseconds((b * RowsPerBatch) + r)))
                    .ToArray();
                await store.WritePredictionsAsync(batch);
                mine.AddRange(batch);
            }

            written[w] = [.. mine];
        })));

        Assert.Equal(Writers * BatchesEach * RowsPerBatch, await store.CountPredictionsAsync(Renewal));
        for (var w = 0; w < Writers; w++)
        {
            var version = "w" + w.ToString(CultureInfo.InvariantCulture);
            var back = await store.GetPredictionsAsync(Renewal, version, T0, T0.AddHours(1));
            Assert.Equal(written[w].Select(p => p.Id), back.Select(p => p.Id));
        }
    }

    [Fact]
    public async Task Concurrent_readers_and_writers_of_stages_and_predictions_do_not_interfere()
    {
        var store = await OpenAsync();
        await store.AddVersionAsync(Version(Renewal, "1", Stage.Shadow), "loader");

        var writes = Task.Run(async () =>
        {
            for (var b = 0; b < 40; b++)
            {
                await store.WritePredictionsAsync(
                    Enumerable.Range(0, 25).Select(r => Prediction(Renewal, "1", T0.AddMilliseconds((b * 25) + r))).ToArray());
            }
        });
        var flips = Task.Run(async () =>
        {
            for (var i = 0; i < 40; i++)
            {
                var (from, to) = i % 2 == 0 ? (Stage.Shadow, Stage.Live) : (Stage.Live, Stage.Shadow);
                await store.ChangeStagesAsync([new StageChange(Renewal, "1", from, to, "flipper", T0.AddSeconds(i))]);
            }
        });
        var reads = Task.Run(async () =>
        {
            for (var i = 0; i < 40; i++)
            {
                Assert.Single(await store.GetVersionsAsync());
                _ = await store.CountPredictionsAsync(Renewal);
                _ = await store.GetPredictionsAsync(Renewal, "1", T0, T0.AddSeconds(1));
            }
        });

        await Task.WhenAll(writes, flips, reads);

        Assert.Equal(1000, await store.CountPredictionsAsync(Renewal));
        Assert.Equal(41, (await store.GetHistoryAsync(Renewal)).Count);
        Assert.Equal(Stage.Shadow, Assert.Single(await store.GetVersionsAsync()).Stage);
    }

    [Fact]
    public async Task Data_survives_disposing_and_reopening_the_store()
    {
        var store = await OpenAsync();
        await store.AddVersionAsync(Version(Renewal, "1", Stage.Shadow, "aaaa", T0), "loader");
        await store.ChangeStagesAsync([new StageChange(Renewal, "1", Stage.Shadow, Stage.Live, "ana", T0.AddMinutes(1))]);
        var rows = Enumerable.Range(0, 50).Select(i => Prediction(Renewal, "1", T0.AddSeconds(i), key: i % 2 == 0 ? null : "k" + i)).ToArray();
        await store.WritePredictionsAsync(rows);
        var versions = await store.GetVersionsAsync();
        var history = await store.GetHistoryAsync(Renewal);
        await store.DisposeAsync();

        var reopened = await OpenAsync();

        Assert.Equal(versions, await reopened.GetVersionsAsync());
        Assert.Equal(history, await reopened.GetHistoryAsync(Renewal));
        var back = await reopened.GetPredictionsAsync(Renewal, "1", T0, T0.AddHours(1));
        Assert.Equal(rows.Length, back.Count);
        foreach (var (expected, actual) in rows.Zip(back))
        {
            AssertSame(expected, actual);
        }
    }

    [Fact]
    public async Task A_disposed_store_refuses_calls_and_disposing_again_is_harmless()
    {
        var store = await OpenAsync();
        await store.DisposeAsync();

        await Assert.ThrowsAsync<ObjectDisposedException>(() => store.GetVersionsAsync());
        await Assert.ThrowsAsync<ObjectDisposedException>(() => store.WritePredictionsAsync([Prediction(Renewal, "1", T0)]));
        await store.DisposeAsync();
    }

    [Fact]
    public async Task A_hundred_thousand_predictions_written_in_batches_of_a_thousand_are_all_stored()
    {
        const int Total = 100_000;
        const int BatchSize = 1_000;
        var store = await OpenAsync();
        var batches = Enumerable.Range(0, Total / BatchSize)
            .Select(b => Enumerable.Range(0, BatchSize)
                .Select(r => Prediction(Renewal, b % 2 == 0 ? "1" : "2", T0.AddMilliseconds((b * BatchSize) + r), key: "policy-" + r, features: SmallFeatures(r)))
                .ToArray())
            .ToArray();

        var watch = Stopwatch.StartNew();
        foreach (var batch in batches)
        {
            await store.WritePredictionsAsync(batch);
        }

        watch.Stop();

        // Correctness only; the time is reported, never asserted.
        Output?.WriteLine($"{Total:N0} predictions in batches of {BatchSize:N0}: {watch.Elapsed.TotalSeconds:F2} s, {Total / watch.Elapsed.TotalSeconds:N0} rows/s");
        Assert.Equal(Total, await store.CountPredictionsAsync(Renewal));
        Assert.Equal(Total / 2, await store.CountPredictionsAsync(Renewal, "2"));
    }

    // ---- helpers -------------------------------------------------------------------------------------------------

    /// <summary>A store over this test's storage, migrated, disposed at the end of the test.</summary>
    protected async Task<IScorerStore> OpenAsync()
    {
        var store = await CreateTrackedAsync();
        await store.MigrateAsync();
        return store;
    }

    protected static ModelVersionRecord Version(string model, string version, Stage stage, string sha = "0123abcd", DateTimeOffset? loadedAt = null) =>
        new(model, version, sha, loadedAt ?? T0, stage);

    protected PredictionRecord Prediction(string model, string version, DateTimeOffset scoredAt, string? key = "policy-1", string? features = null)
    {
        var eta = (scoredAt.ToUnixTimeMilliseconds() % 1000 / 250.0) - 2.0;
        // Time-ordered ids, as the service is expected to make them (Guid.CreateVersion7).
        return new PredictionRecord(
            Guid.CreateVersion7(scoredAt), model, version, Stage.Live, Aligned(scoredAt), key, eta, 1.0 / (1.0 + Math.Exp(-eta)), features ?? SmallFeatures(1));
    }

    /// <summary><paramref name="time"/> rounded down to a whole multiple of <see cref="TimePrecision"/> since the Unix epoch.</summary>
    protected DateTimeOffset Aligned(DateTimeOffset time)
    {
        var sinceEpoch = time.UtcTicks - DateTimeOffset.UnixEpoch.UtcTicks;
        return time.AddTicks(-(((sinceEpoch % TimePrecision.Ticks) + TimePrecision.Ticks) % TimePrecision.Ticks));
    }

    /// <summary>Equal field by field, doubles compared by their bits (so -0.0 differs from 0.0).</summary>
    protected static void AssertSame(PredictionRecord expected, PredictionRecord actual)
    {
        Assert.Equal(expected.Id, actual.Id);
        Assert.Equal(expected.Model, actual.Model);
        Assert.Equal(expected.Version, actual.Version);
        Assert.Equal(expected.Stage, actual.Stage);
        Assert.Equal(expected.ScoredAt, actual.ScoredAt);
        Assert.Equal(TimeSpan.Zero, actual.ScoredAt.Offset);
        Assert.Equal(expected.Key, actual.Key);
        Assert.Equal(BitConverter.DoubleToInt64Bits(expected.Eta), BitConverter.DoubleToInt64Bits(actual.Eta));
        Assert.Equal(BitConverter.DoubleToInt64Bits(expected.Probability), BitConverter.DoubleToInt64Bits(actual.Probability));
        Assert.Equal(expected.FeaturesJson, actual.FeaturesJson);
        Assert.Equal(expected.LiveId, actual.LiveId);
    }

    private static string SmallFeatures(int i) => string.Create(
        CultureInfo.InvariantCulture, $"{{\"age\":{20 + (i % 60)},\"region\":\"north\",\"premium\":{(i * 7.25) + 100.5},\"claims\":{i % 4}}}");

    private static List<ModelVersionRecord> Sorted(IEnumerable<ModelVersionRecord> versions) =>
        [.. versions.OrderBy(v => v.Model, StringComparer.Ordinal).ThenBy(v => v.Version, StringComparer.Ordinal)];

    private async Task<IScorerStore> CreateTrackedAsync()
    {
        var store = await CreateStoreAsync();
        _opened.Add(store);
        return store;
    }
}
