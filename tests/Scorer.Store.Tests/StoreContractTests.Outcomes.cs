namespace Scorer.Store.Tests;

/// <summary>Outcomes: recording by id and by key, idempotency, conflicts, implicit negatives, and reading them back.</summary>
public abstract partial class StoreContractTests
{
    private static readonly DateTimeOffset Later = T0.AddDays(40);

    [Fact]
    public async Task An_outcome_by_id_labels_its_prediction_and_reads_back_with_the_prediction_copied_in()
    {
        var store = await OpenAsync();
        var a = Prediction(Renewal, "1", T0);
        var b = Prediction(Renewal, "1", T0.AddMinutes(1));
        await store.WritePredictionsAsync([a, b]);

        var receipt = await store.RecordOutcomesAsync(Renewal, [new OutcomeReport(a.Id, null, 1, T0.AddDays(3))], ConflictPolicy.KeepFirst, Later);

        Assert.Equal(1, receipt.Accepted);
        Assert.Equal(0, receipt.Duplicates);
        Assert.Empty(receipt.Unknown);
        Assert.Empty(receipt.Conflicts);
        var labelled = Assert.Single(await store.GetLabelledAsync(Renewal, "1", T0, T0.AddHours(1)));
        Assert.Equal(a.Id, labelled.Id);
        Assert.Equal(1, labelled.Outcome);
        Assert.False(labelled.Implicit);
        Assert.Equal(a.ScoredAt, labelled.ScoredAt);
        Assert.Equal(BitConverter.DoubleToInt64Bits(a.Probability), BitConverter.DoubleToInt64Bits(labelled.Probability));
        Assert.Equal(BitConverter.DoubleToInt64Bits(a.Eta), BitConverter.DoubleToInt64Bits(labelled.Eta));
        Assert.Equal(Later, labelled.RecordedAt);
    }

    [Fact]
    public async Task The_same_outcome_twice_counts_once_and_a_different_one_is_a_conflict_kept_first_by_default_policy()
    {
        var store = await OpenAsync();
        var a = Prediction(Renewal, "1", T0);
        await store.WritePredictionsAsync([a]);
        await store.RecordOutcomesAsync(Renewal, [new OutcomeReport(a.Id, null, 1)], ConflictPolicy.KeepFirst, Later);

        var again = await store.RecordOutcomesAsync(Renewal, [new OutcomeReport(a.Id, null, 1), new OutcomeReport(a.Id, null, 0)], ConflictPolicy.KeepFirst, Later);

        Assert.Equal(0, again.Accepted);
        Assert.Equal(1, again.Duplicates);
        Assert.Equal([a.Id.ToString()], again.Conflicts);
        Assert.Equal(1, Assert.Single(await store.GetLabelledAsync(Renewal, null, T0, Later)).Outcome);
    }

    [Fact]
    public async Task Under_take_latest_a_changed_outcome_replaces_the_first_and_is_still_reported()
    {
        var store = await OpenAsync();
        var a = Prediction(Renewal, "1", T0);
        await store.WritePredictionsAsync([a]);
        await store.RecordOutcomesAsync(Renewal, [new OutcomeReport(a.Id, null, 1)], ConflictPolicy.TakeLatest, Later);

        var changed = await store.RecordOutcomesAsync(Renewal, [new OutcomeReport(a.Id, null, 0)], ConflictPolicy.TakeLatest, Later.AddDays(1));

        Assert.Equal([a.Id.ToString()], changed.Conflicts);
        var labelled = Assert.Single(await store.GetLabelledAsync(Renewal, null, T0, Later));
        Assert.Equal(0, labelled.Outcome);
        Assert.Equal(Later.AddDays(1), labelled.RecordedAt);
    }

    [Fact]
    public async Task Unknown_ids_and_keys_and_predictions_of_another_model_are_listed_as_unknown()
    {
        var store = await OpenAsync();
        var claim = Prediction(Claims, "1", T0, key: "claim-9");
        await store.WritePredictionsAsync([claim]);
        var stranger = Guid.CreateVersion7(T0);

        var receipt = await store.RecordOutcomesAsync(Renewal,
            [new OutcomeReport(stranger, null, 1), new OutcomeReport(null, "no-such-key", 0), new OutcomeReport(claim.Id, null, 1)], ConflictPolicy.KeepFirst, Later);

        Assert.Equal(0, receipt.Accepted);
        Assert.Equal([stranger.ToString(), "no-such-key", claim.Id.ToString()], receipt.Unknown);
        Assert.Empty(await store.GetLabelledAsync(Claims, null, T0, Later));
    }

    [Fact]
    public async Task An_outcome_by_key_labels_every_prediction_of_the_model_with_that_key()
    {
        var store = await OpenAsync();
        var first = Prediction(Renewal, "1", T0, key: "policy-7");
        var second = Prediction(Renewal, "2", T0.AddSeconds(1), key: "policy-7");
        var other = Prediction(Renewal, "1", T0.AddSeconds(2), key: "policy-8");
        await store.WritePredictionsAsync([first, second, other]);

        var receipt = await store.RecordOutcomesAsync(Renewal, [new OutcomeReport(null, "policy-7", 1)], ConflictPolicy.KeepFirst, Later);

        Assert.Equal(1, receipt.Accepted);
        var labelled = await store.GetLabelledAsync(Renewal, null, T0, Later);
        Assert.Equal([first.Id, second.Id], labelled.Select(l => l.Id));
        Assert.Equal(["1", "2"], labelled.Select(l => l.Version));
    }

    [Fact]
    public async Task An_outcome_for_a_live_prediction_also_labels_the_shadow_predictions_paired_with_it()
    {
        var store = await OpenAsync();
        var live = Prediction(Renewal, "1", T0);
        var shadow = Prediction(Renewal, "2", T0) with { Id = Guid.CreateVersion7(T0.AddMilliseconds(1)), Stage = Stage.Shadow, LiveId = live.Id };
        await store.WritePredictionsAsync([live, shadow]);
        AssertSame(shadow, (await store.GetPredictionAsync(shadow.Id))!);

        await store.RecordOutcomesAsync(Renewal, [new OutcomeReport(live.Id, null, 1)], ConflictPolicy.KeepFirst, Later);

        var shadowLabels = await store.GetLabelledAsync(Renewal, "2", T0, Later);
        Assert.Equal(shadow.Id, Assert.Single(shadowLabels).Id);
        Assert.Equal(Stage.Shadow, shadowLabels[0].Stage);
        var pair = Assert.Single(await store.GetPairedAsync(Renewal, "1", "2", T0, Later));
        Assert.Equal(new PairedOutcome(live.Probability, shadow.Probability, 1), pair);
        Assert.Empty(await store.GetPairedAsync(Renewal, "2", "1", T0, Later));
    }

    [Fact]
    public async Task The_latest_pairs_are_the_newest_of_the_range_in_prediction_time_order()
    {
        // Ten live predictions an hour apart, each with a shadow one, all labelled; a third version's pairs stay out.
        var store = await OpenAsync();
        var lives = Enumerable.Range(0, 10).Select(i => Prediction(Renewal, "1", T0.AddHours(i))).ToList();
        var shadows = lives.Select((l, i) => Prediction(Renewal, "2", T0.AddHours(i)) with
        {
            Id = Guid.CreateVersion7(T0.AddHours(i).AddMilliseconds(1)), Stage = Stage.Shadow, LiveId = l.Id, Probability = 0.01 * (i + 1),
        }).ToList();
        var others = lives.Select((l, i) => Prediction(Renewal, "3", T0.AddHours(i)) with
        {
            Id = Guid.CreateVersion7(T0.AddHours(i).AddMilliseconds(2)), Stage = Stage.Shadow, LiveId = l.Id, Probability = 0.9,
        }).ToList();
        await store.WritePredictionsAsync([.. lives, .. shadows, .. others]);
        await store.RecordOutcomesAsync(Renewal, [.. lives.Select((l, i) => new OutcomeReport(l.Id, null, (byte)(i % 2)))], ConflictPolicy.KeepFirst, Later);

        var all = await store.GetPairedAsync(Renewal, "1", "2", T0, Later);
        Assert.Equal(10, all.Count);
        var latest = await store.GetPairedAsync(Renewal, "1", "2", T0, Later, latest: 3);
        Assert.Equal(all.Skip(7), latest);
        Assert.Equal([0.08, 0.09, 0.1], latest.Select(p => p.ShadowProbability).ToArray());

        // Within a range that ends before the newest: the newest of that range.
        var earlier = await store.GetPairedAsync(Renewal, "1", "2", T0, T0.AddHours(5), latest: 2);
        Assert.Equal(all.Skip(3).Take(2), earlier);
        Assert.Equal(all, await store.GetPairedAsync(Renewal, "1", "2", T0, Later, latest: 100));
    }

    [Fact]
    public async Task Implicit_negatives_label_only_matured_predictions_without_an_outcome_and_each_once()
    {
        var store = await OpenAsync();
        var rows = Enumerable.Range(0, 10).Select(i => Prediction(Renewal, "1", T0.AddHours(i), key: $"p-{i}")).ToList();
        await store.WritePredictionsAsync(rows);
        await store.RecordOutcomesAsync(Renewal, [new OutcomeReport(rows[2].Id, null, 1)], ConflictPolicy.KeepFirst, Later);

        // Horizon passed for the first six rows only (scored before T0 + 5h 30m).
        var recorded = await store.RecordImplicitNegativesAsync(Renewal, T0.AddHours(5.5), Later, limit: 100);
        var again = await store.RecordImplicitNegativesAsync(Renewal, T0.AddHours(5.5), Later, limit: 100);

        Assert.Equal(5, recorded);
        Assert.Equal(0, again);
        var labelled = await store.GetLabelledAsync(Renewal, "1", T0, Later);
        Assert.Equal(rows.Take(6).Select(r => r.Id), labelled.Select(l => l.Id));
        Assert.Equal([0, 0, 1, 0, 0, 0], labelled.Select(l => (int)l.Outcome));
        Assert.Equal([true, true, false, true, true, true], labelled.Select(l => l.Implicit));

        // Later, the rest mature; the walk resumes where it stopped, in small steps.
        Assert.Equal(2, await store.RecordImplicitNegativesAsync(Renewal, Later, Later, limit: 2));
        Assert.Equal(2, await store.RecordImplicitNegativesAsync(Renewal, Later, Later, limit: 2));
        Assert.Equal(10, (await store.GetLabelledAsync(Renewal, "1", T0, Later)).Count);
    }

    [Fact]
    public async Task A_positive_reported_after_an_implicit_negative_is_a_conflict_that_says_so()
    {
        var store = await OpenAsync();
        var a = Prediction(Renewal, "1", T0);
        await store.WritePredictionsAsync([a]);
        await store.RecordImplicitNegativesAsync(Renewal, T0.AddDays(30), T0.AddDays(30));

        var late = await store.RecordOutcomesAsync(Renewal, [new OutcomeReport(a.Id, null, 1)], ConflictPolicy.KeepFirst, T0.AddDays(31));

        Assert.Equal([a.Id.ToString()], late.Conflicts);
        var labelled = Assert.Single(await store.GetLabelledAsync(Renewal, "1", T0, Later));
        Assert.Equal(0, labelled.Outcome);
        Assert.True(labelled.Implicit);
    }

    [Fact]
    public async Task Predictions_are_counted_by_version_and_minute_without_reading_the_log()
    {
        var store = await OpenAsync();
        var start = new DateTimeOffset(2025, 3, 14, 9, 0, 0, TimeSpan.Zero);
        await store.WritePredictionsAsync([.. Enumerable.Range(0, 90).Select(i => Prediction(Renewal, "1", start.AddSeconds(i * 2)))]);
        await store.WritePredictionsAsync([.. Enumerable.Range(0, 30).Select(i => Prediction(Renewal, "1", start.AddSeconds(i * 2)))]);
        await store.WritePredictionsAsync([Prediction(Renewal, "2", start)]);

        Assert.Equal(120, await store.CountPredictionsByMinuteAsync(Renewal, "1", start, start.AddMinutes(3)));
        Assert.Equal(30, await store.CountPredictionsByMinuteAsync(Renewal, "1", start.AddMinutes(1), start.AddMinutes(2))); // 09:01:00–09:01:58
        Assert.Equal(30, await store.CountPredictionsByMinuteAsync(Renewal, "1", start.AddSeconds(30), start.AddMinutes(2))); // the minute of 09:00 starts before
        Assert.Equal(1, await store.CountPredictionsByMinuteAsync(Renewal, "2", start, start.AddMinutes(3)));
    }

    [Fact]
    public async Task A_report_with_neither_id_nor_key_or_an_outcome_other_than_0_or_1_is_refused_and_nothing_is_recorded()
    {
        var store = await OpenAsync();
        var a = Prediction(Renewal, "1", T0);
        await store.WritePredictionsAsync([a]);

        await Assert.ThrowsAsync<ArgumentException>(() => store.RecordOutcomesAsync(Renewal,
            [new OutcomeReport(a.Id, null, 1), new OutcomeReport(null, null, 1)], ConflictPolicy.KeepFirst, Later));
        await Assert.ThrowsAsync<ArgumentException>(() => store.RecordOutcomesAsync(Renewal, [new OutcomeReport(a.Id, null, 2)], ConflictPolicy.KeepFirst, Later));

        Assert.Empty(await store.GetLabelledAsync(Renewal, null, T0, Later));
    }

    [Fact]
    public async Task An_undefined_conflict_policy_is_refused_naming_the_policy_and_nothing_is_recorded()
    {
        var store = await OpenAsync();
        var a = Prediction(Renewal, "1", T0);
        await store.WritePredictionsAsync([a]);

        var error = await Assert.ThrowsAsync<ArgumentOutOfRangeException>(() => store.RecordOutcomesAsync(Renewal, [new OutcomeReport(a.Id, null, 1)], (ConflictPolicy)2, Later));

        Assert.Equal("policy", error.ParamName);
        Assert.Empty(await store.GetLabelledAsync(Renewal, null, T0, Later));
    }

    [Fact]
    public async Task Outcomes_survive_a_restart()
    {
        var first = await OpenAsync();
        var a = Prediction(Renewal, "1", T0);
        await first.WritePredictionsAsync([a]);
        await first.RecordOutcomesAsync(Renewal, [new OutcomeReport(a.Id, null, 1)], ConflictPolicy.KeepFirst, Later);
        await first.DisposeAsync();

        var second = await OpenAsync();
        Assert.Single(await second.GetLabelledAsync(Renewal, "1", T0, Later));
    }
}
