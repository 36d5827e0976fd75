namespace Scorer.Store.Tests;

/// <summary>The export's read: labelled rows with their logged features, in pages from a position on.</summary>
public abstract partial class StoreContractTests
{
    [Fact]
    public async Task Labelled_rows_read_in_pages_come_once_each_in_the_order_of_the_labelled_read_with_their_rows()
    {
        var store = await OpenAsync();
        var predictions = new List<PredictionRecord>();
        for (var i = 0; i < 23; i++)
        {
            // Three versions interleaved; every fourth instant shared by three rows with random (version 4) ids, so
            // that ties are broken by the store's order of ids.
            var at = T0.AddSeconds(i);
            var version = (i % 3 + 1).ToString(System.Globalization.CultureInfo.InvariantCulture);
            predictions.Add(Prediction(Renewal, version, at, key: $"policy-{i}", features: SmallFeatures(i)));
            if (i % 4 == 0)
            {
                predictions.Add(Prediction(Renewal, version, at, key: null, features: UnicodeFeatures) with { Id = Guid.NewGuid() });
                predictions.Add(Prediction(Renewal, "2", at, key: $"tie-{i}") with { Id = Guid.NewGuid() });
            }
        }

        var unlabelled = Prediction(Renewal, "1", T0.AddSeconds(5));
        var outside = Prediction(Renewal, "1", T0.AddDays(-1));
        var otherModel = Prediction(Claims, "1", T0.AddSeconds(3));
        await store.WritePredictionsAsync([.. predictions, unlabelled, outside, otherModel]);
        await store.RecordOutcomesAsync(Renewal, [.. predictions.Select((p, i) => new OutcomeReport(p.Id, null, (byte)(i % 2))), new OutcomeReport(outside.Id, null, 1)],
            ConflictPolicy.KeepFirst, Later);
        await store.RecordOutcomesAsync(Claims, [new OutcomeReport(otherModel.Id, null, 1)], ConflictPolicy.KeepFirst, Later);
        var byId = predictions.ToDictionary(p => p.Id);

        foreach (var version in new[] { null, "2" })
        {
            var expected = await store.GetLabelledAsync(Renewal, version, T0, T0.AddHours(1));
            Assert.Equal(version is null ? predictions.Count : predictions.Count(p => p.Version == "2"), expected.Count);
            var read = new List<LabelledRow>();
            LabelledRowPosition? after = null;
            for (var pages = 0; ; pages++)
            {
                Assert.True(pages <= expected.Count, "the pages do not end");
                var page = await store.GetLabelledRowsAsync(Renewal, version, T0, T0.AddHours(1), after, limit: 4);
                Assert.True(page.Count <= 4, $"a page of {page.Count} rows; the limit is 4");
                read.AddRange(page);
                if (page.Count < 4)
                {
                    break;
                }

                after = page[^1].Position;
            }

            Assert.Equal(expected, read.Select(r => r.Prediction));
            Assert.All(read, r =>
            {
                Assert.Equal(byId[r.Prediction.Id].Key, r.Key);
                Assert.Equal(byId[r.Prediction.Id].FeaturesJson, r.FeaturesJson);
            });
        }
    }

    [Fact]
    public async Task A_page_of_labelled_rows_starts_after_the_position_given_within_the_range_and_a_page_limit_below_one_is_refused()
    {
        var store = await OpenAsync();
        var rows = Enumerable.Range(0, 5).Select(i => Prediction(Renewal, "1", T0.AddMinutes(i))).ToList();
        await store.WritePredictionsAsync(rows);
        await store.RecordOutcomesAsync(Renewal, [.. rows.Select(p => new OutcomeReport(p.Id, null, 1))], ConflictPolicy.KeepFirst, Later);

        var first = await store.GetLabelledRowsAsync(Renewal, null, T0, Later, null, 2);
        var rest = await store.GetLabelledRowsAsync(Renewal, null, T0, Later, first[^1].Position, 10);

        Assert.Equal(rows.Take(2).Select(p => p.Id), first.Select(r => r.Prediction.Id));
        Assert.Equal(rows.Skip(2).Select(p => p.Id), rest.Select(r => r.Prediction.Id));
        Assert.Empty(await store.GetLabelledRowsAsync(Renewal, null, T0, Later, rest[^1].Position, 10));

        // A position before the range starts the page at the range's start.
        var late = await store.GetLabelledRowsAsync(Renewal, null, T0.AddMinutes(3), Later, first[0].Position, 10);
        Assert.Equal(rows.Skip(3).Select(p => p.Id), late.Select(r => r.Prediction.Id));
        await Assert.ThrowsAsync<ArgumentOutOfRangeException>(() => store.GetLabelledRowsAsync(Renewal, null, T0, Later, null, 0));
    }
}
