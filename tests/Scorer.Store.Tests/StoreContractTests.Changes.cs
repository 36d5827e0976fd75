namespace Scorer.Store.Tests;

/// <summary>The labelled-change feed the monitor's row cache reads: everything labelled or relabelled, once or more, never skipped.</summary>
public abstract partial class StoreContractTests
{
    [Fact]
    public async Task The_change_feed_returns_each_new_outcome_once_with_its_prediction_and_then_nothing_until_something_changes()
    {
        var store = await OpenAsync();
        var a = Prediction(Renewal, "1", T0);
        var b = Prediction(Renewal, "1", T0.AddMinutes(1));
        var other = Prediction(Renewal, "2", T0);
        await store.WritePredictionsAsync([a, b, other]);
        await store.RecordOutcomesAsync(Renewal, [new OutcomeReport(a.Id, null, 1), new OutcomeReport(other.Id, null, 0)], ConflictPolicy.KeepFirst, Later);

        var first = await store.GetLabelledChangesAsync(Renewal, "1", 0);
        var point = Assert.Single(first.Points);
        Assert.Equal(a.Id, point.Id);
        Assert.Equal(a.ScoredAt, point.ScoredAt);
        Assert.Equal(BitConverter.DoubleToInt64Bits(a.Probability), BitConverter.DoubleToInt64Bits(point.Probability));
        Assert.Equal(1, point.Outcome);
        Assert.True(first.Cursor > 0);

        var none = await store.GetLabelledChangesAsync(Renewal, "1", first.Cursor);
        Assert.Empty(none.Points);
        Assert.Equal(first.Cursor, none.Cursor);

        await store.RecordOutcomesAsync(Renewal, [new OutcomeReport(b.Id, null, 0)], ConflictPolicy.KeepFirst, Later);
        var second = await store.GetLabelledChangesAsync(Renewal, "1", first.Cursor);
        Assert.Equal(b.Id, Assert.Single(second.Points).Id);
        Assert.True(second.Cursor > first.Cursor);
    }

    [Fact]
    public async Task The_change_feed_reports_a_changed_outcome_again_with_its_new_value_and_nothing_for_duplicates()
    {
        var store = await OpenAsync();
        var a = Prediction(Renewal, "1", T0);
        await store.WritePredictionsAsync([a]);
        await store.RecordOutcomesAsync(Renewal, [new OutcomeReport(a.Id, null, 1)], ConflictPolicy.TakeLatest, Later);
        var seen = await store.GetLabelledChangesAsync(Renewal, "1", 0);

        await store.RecordOutcomesAsync(Renewal, [new OutcomeReport(a.Id, null, 1)], ConflictPolicy.TakeLatest, Later); // a duplicate
        Assert.Empty((await store.GetLabelledChangesAsync(Renewal, "1", seen.Cursor)).Points);

        await store.RecordOutcomesAsync(Renewal, [new OutcomeReport(a.Id, null, 0)], ConflictPolicy.TakeLatest, Later.AddDays(1));
        var changed = Assert.Single((await store.GetLabelledChangesAsync(Renewal, "1", seen.Cursor)).Points);
        Assert.Equal(a.Id, changed.Id);
        Assert.Equal(0, changed.Outcome);
    }

    [Fact]
    public async Task The_change_feed_includes_implicit_negatives_and_a_late_positive_that_replaces_one()
    {
        var store = await OpenAsync();
        var a = Prediction(Renewal, "1", T0);
        await store.WritePredictionsAsync([a]);
        Assert.Equal(1, await store.RecordImplicitNegativesAsync(Renewal, T0.AddDays(1), Later));
        var implicitZero = await store.GetLabelledChangesAsync(Renewal, "1", 0);
        Assert.Equal(0, Assert.Single(implicitZero.Points).Outcome);

        await store.RecordOutcomesAsync(Renewal, [new OutcomeReport(a.Id, null, 1)], ConflictPolicy.TakeLatest, Later.AddDays(2));
        Assert.Equal(1, Assert.Single((await store.GetLabelledChangesAsync(Renewal, "1", implicitZero.Cursor)).Points).Outcome);
    }

    [Fact]
    public async Task A_reader_polling_while_two_writers_record_outcomes_sees_every_outcome_with_its_final_value()
    {
        var writerA = await OpenAsync();
        var writerB = await OpenAsync();
        var reader = await OpenAsync();
        const int PerWriter = 400;
        var predictions = Enumerable.Range(0, 2 * PerWriter).Select(i => Prediction(Renewal, "1", T0.AddSeconds(i))).ToArray();
        await writerA.WritePredictionsAsync(predictions);

        async Task WriteAsync(IScorerStore store, int offset)
        {
            for (var i = 0; i < PerWriter; i += 20)
            {
                var batch = Enumerable.Range(offset + i, 20).Select(j => new OutcomeReport(predictions[j].Id, null, (byte)(j % 3 == 0 ? 1 : 0))).ToArray();
                await store.RecordOutcomesAsync(Renewal, batch, ConflictPolicy.KeepFirst, Later);
            }
        }

        var seen = new Dictionary<Guid, byte>();
        var cursor = 0L;
        var writers = Task.WhenAll(Task.Run(() => WriteAsync(writerA, 0)), Task.Run(() => WriteAsync(writerB, PerWriter)));
        while (!writers.IsCompleted)
        {
            var changes = await reader.GetLabelledChangesAsync(Renewal, "1", cursor);
            foreach (var p in changes.Points)
            {
                seen[p.Id] = p.Outcome;
            }

            cursor = changes.Cursor;
        }

        await writers;
        foreach (var p in (await reader.GetLabelledChangesAsync(Renewal, "1", cursor)).Points)
        {
            seen[p.Id] = p.Outcome;
        }

        Assert.Equal(2 * PerWriter, seen.Count);
        for (var j = 0; j < predictions.Length; j++)
        {
            Assert.Equal(j % 3 == 0 ? 1 : 0, seen[predictions[j].Id]);
        }
    }
}

/// <summary>Leases and the charts' saved state.</summary>
public abstract partial class StoreContractTests
{
    [Fact]
    public async Task A_chart_state_saved_under_a_held_lease_reads_back_and_is_replaced_by_the_next_save()
    {
        var store = await OpenAsync();
        Assert.Null(await store.GetChartStateAsync(Renewal, "1"));
        Assert.True(await store.TryHoldLeaseAsync("charts"));

        await store.SaveChartStateAsync(Renewal, "1", "{\"steps\":1}", "charts");
        await store.SaveChartStateAsync(Renewal, "1", "{\"steps\":2,\"é\":\"東京\"}", "charts");
        await store.SaveChartStateAsync(Renewal, "2", "{\"steps\":9}", "charts");

        Assert.Equal("{\"steps\":2,\"é\":\"東京\"}", await store.GetChartStateAsync(Renewal, "1"));
        Assert.Equal("{\"steps\":9}", await (await OpenAsync()).GetChartStateAsync(Renewal, "2"));
    }

    [Fact]
    public async Task A_released_lease_refuses_saves_and_can_be_taken_again()
    {
        var store = await OpenAsync();
        Assert.True(await store.TryHoldLeaseAsync("charts"));
        await store.ReleaseLeaseAsync("charts");

        await Assert.ThrowsAsync<LeaseLostException>(() => store.SaveChartStateAsync(Renewal, "1", "{}", "charts"));
        Assert.Null(await store.GetChartStateAsync(Renewal, "1"));
        Assert.True(await store.TryHoldLeaseAsync("charts"));
        await store.SaveChartStateAsync(Renewal, "1", "{}", "charts");
    }

    [Fact]
    public async Task Of_two_instances_sharing_the_storage_only_one_holds_a_lease_and_the_other_cannot_save_under_it()
    {
        var first = await OpenAsync();
        var second = await OpenAsync();

        Assert.True(await first.TryHoldLeaseAsync("charts"));
        Assert.True(await first.TryHoldLeaseAsync("charts")); // confirmed
        Assert.False(await second.TryHoldLeaseAsync("charts"));
        await Assert.ThrowsAsync<LeaseLostException>(() => second.SaveChartStateAsync(Renewal, "1", "{\"by\":\"second\"}", "charts"));
        Assert.True(await second.TryHoldLeaseAsync("other-work")); // leases are by name
        await first.SaveChartStateAsync(Renewal, "1", "{\"by\":\"first\"}", "charts");

        Assert.Equal("{\"by\":\"first\"}", await second.GetChartStateAsync(Renewal, "1"));
    }

    [Fact]
    public async Task A_lease_released_by_its_holder_is_taken_by_the_other_instance_and_the_old_holder_can_no_longer_save()
    {
        var first = await OpenAsync();
        var second = await OpenAsync();
        Assert.True(await first.TryHoldLeaseAsync("charts"));

        await second.ReleaseLeaseAsync("charts"); // not its own: changes nothing
        Assert.False(await second.TryHoldLeaseAsync("charts"));
        await first.ReleaseLeaseAsync("charts");

        Assert.True(await second.TryHoldLeaseAsync("charts"));
        Assert.False(await first.TryHoldLeaseAsync("charts"));
        await Assert.ThrowsAsync<LeaseLostException>(() => first.SaveChartStateAsync(Renewal, "1", "{}", "charts"));
        await second.SaveChartStateAsync(Renewal, "1", "{\"by\":\"second\"}", "charts");
        Assert.Equal("{\"by\":\"second\"}", await first.GetChartStateAsync(Renewal, "1"));
    }

    [Fact]
    public async Task A_disposed_holder_lets_its_leases_go_at_once()
    {
        var first = await OpenAsync();
        var second = await OpenAsync();
        Assert.True(await first.TryHoldLeaseAsync("charts"));
        Assert.False(await second.TryHoldLeaseAsync("charts"));

        await first.DisposeAsync();

        Assert.True(await second.TryHoldLeaseAsync("charts"));
    }
}
