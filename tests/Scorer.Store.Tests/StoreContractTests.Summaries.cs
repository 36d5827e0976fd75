namespace Scorer.Store.Tests;

/// <summary>What the monitor's summaries rely on: the feed in pages of whole transactions, revised outcomes marked, rows up to a cursor, and fenced saves of buckets.</summary>
public abstract partial class StoreContractTests
{
    [Fact]
    public async Task The_change_feed_pages_by_whole_transactions_and_loses_nothing_between_pages()
    {
        var store = await OpenAsync();
        var predictions = Enumerable.Range(0, 6).Select(i => Prediction(Renewal, "1", T0.AddMinutes(i))).ToList();
        await store.WritePredictionsAsync(predictions);
        for (var t = 0; t < 3; t++)
        {
            // Three transactions of two outcomes each.
            await store.RecordOutcomesAsync(Renewal, [new OutcomeReport(predictions[2 * t].Id, null, 1), new OutcomeReport(predictions[2 * t + 1].Id, null, 0)],
                ConflictPolicy.KeepFirst, Later);
        }

        // A limit of 3 ends inside the second transaction: the page takes the whole of it.
        var first = await store.GetLabelledChangesAsync(Renewal, "1", 0, limit: 3);
        Assert.Equal(4, first.Points.Count);
        var second = await store.GetLabelledChangesAsync(Renewal, "1", first.Cursor, limit: 3);
        Assert.Equal(2, second.Points.Count);
        var third = await store.GetLabelledChangesAsync(Renewal, "1", second.Cursor, limit: 3);
        Assert.Empty(third.Points);
        Assert.Equal(predictions.Select(p => p.Id).Order(), first.Points.Concat(second.Points).Select(p => p.Id).Order());
        Assert.All(first.Points.Concat(second.Points), p => Assert.False(p.Revised));
    }

    [Fact]
    public async Task A_changed_outcome_comes_back_marked_revised_and_rows_up_to_a_cursor_leave_out_later_changes()
    {
        var store = await OpenAsync();
        var a = Prediction(Renewal, "1", T0);
        var b = Prediction(Renewal, "1", T0.AddMinutes(1));
        await store.WritePredictionsAsync([a, b]);
        await store.RecordOutcomesAsync(Renewal, [new OutcomeReport(a.Id, null, 1)], ConflictPolicy.TakeLatest, Later);
        var seen = await store.GetLabelledChangesAsync(Renewal, "1", 0);
        Assert.False(Assert.Single(seen.Points).Revised);

        await store.RecordOutcomesAsync(Renewal, [new OutcomeReport(a.Id, null, 0), new OutcomeReport(b.Id, null, 1)], ConflictPolicy.TakeLatest, Later.AddDays(1));
        var changed = await store.GetLabelledChangesAsync(Renewal, "1", seen.Cursor);
        Assert.True(changed.Points.Single(p => p.Id == a.Id).Revised);
        Assert.False(changed.Points.Single(p => p.Id == b.Id).Revised);

        // Up to the first cursor: a's last change came after it, b's too: neither. Up to the second: both, as they are now.
        Assert.Empty(await store.GetLabelledUpToAsync(Renewal, "1", T0, T0.AddHours(1), seen.Cursor));
        var now = await store.GetLabelledUpToAsync(Renewal, "1", T0, T0.AddHours(1), changed.Cursor);
        Assert.Equal(0, now.Single(p => p.Id == a.Id).Outcome);
        Assert.Equal(1, now.Single(p => p.Id == b.Id).Outcome);
        Assert.Empty(await store.GetLabelledUpToAsync(Renewal, "1", T0.AddHours(1), T0.AddHours(2), changed.Cursor));
    }

    [Fact]
    public async Task Summaries_are_saved_with_their_cursor_read_by_revision_deleted_and_refused_without_the_lease()
    {
        var store = await OpenAsync();
        Assert.Null(await store.GetSummaryStateAsync(Renewal, "1"));
        Assert.True(await store.TryHoldLeaseAsync("monitor-summaries"));
        var hour = TimeSpan.FromHours(1);
        var start = new DateTimeOffset(2025, 3, 14, 9, 0, 0, TimeSpan.Zero); // buckets start on whole hours
        await store.SaveSummariesAsync(Renewal, "1", 7, 1,
            [new StoredSummary("", start, hour, [1, 2, 3], 0), new StoredSummary("", start + hour, hour, [4], 0)], [], "monitor-summaries");
        Assert.Equal(new SummaryState(7, 1), await store.GetSummaryStateAsync(Renewal, "1"));

        await store.SaveSummariesAsync(Renewal, "1", 9, 2, [new StoredSummary("", start + hour, hour, [5, 6], 0)], [("", start)], "monitor-summaries");
        var all = await store.GetSummariesAsync(Renewal, "1", -1);
        var only = Assert.Single(all);
        Assert.Equal(start + hour, only.Start);
        Assert.Equal(hour, only.Length);
        Assert.Equal(new byte[] { 5, 6 }, only.Summary);
        Assert.Equal(2, only.Revision);
        Assert.Empty(Assert.Single(await store.GetSummariesAsync(Renewal, "1", 2)).Summary); // listed, its document not sent again

        await store.ReleaseLeaseAsync("monitor-summaries");
        await Assert.ThrowsAsync<LeaseLostException>(() =>
            store.SaveSummariesAsync(Renewal, "1", 11, 3, [new StoredSummary("", start, hour, [9], 0)], [], "monitor-summaries"));
        Assert.Equal(new SummaryState(9, 2), await store.GetSummaryStateAsync(Renewal, "1"));
        Assert.Single(await store.GetSummariesAsync(Renewal, "1", -1));
    }
}
