using System.Text.Json;
using Microsoft.Extensions.Logging.Abstractions;

namespace Scorer.Store.Tests;

/// <summary>The prediction log over each driver: a row the store refuses never stops the rows around it or after it.</summary>
public abstract partial class StoreContractTests
{
    /// <summary>Rows the store refuses for what they hold; each driver may add its own (PostgreSQL: a U+0000 in text).</summary>
    protected virtual IEnumerable<(string Why, Func<PredictionRecord, PredictionRecord> Spoil)> Refusals()
    {
        yield return ("a non-finite eta", r => r with { Eta = double.NaN });
        yield return ("an id already stored", r => r with { Id = _alreadyStored });
    }

    private Guid _alreadyStored;

    [Fact]
    public async Task A_row_the_store_refuses_is_set_aside_with_its_reason_and_every_other_row_is_written()
    {
        // Arrange
        var store = await OpenAsync();
        var stored = Prediction(Renewal, "1", T0);
        await store.WritePredictionsAsync([stored]);
        _alreadyStored = stored.Id;
        var refusals = Refusals().ToList();
        var folder = Path.Combine(Path.GetTempPath(), "scorer-set-aside-" + Guid.NewGuid().ToString("N"));
        var log = new PredictionLog(store, new PredictionLogOptions { MaxBatch = 100, MaxDelay = TimeSpan.FromMilliseconds(1), SetAsideFolder = folder },
            NullLogger<PredictionLog>.Instance);
        var rows = Enumerable.Range(1, 1000).Select(i => Prediction(Renewal, "1", T0.AddMilliseconds(i))).ToList();
        var spoiled = new Dictionary<int, string>();
        for (var j = 0; j < refusals.Count; j++)
        {
            var at = 137 + (j * 251); // in the middle of a batch of 100
            rows[at] = refusals[j].Spoil(rows[at]);
            spoiled[at] = refusals[j].Why;
        }

        try
        {
            // Act: the refused rows sit among good ones, in different batches.
            foreach (var row in rows)
            {
                Assert.True(log.TryEnqueue(row));
            }

            await log.StopAsync();

            // Assert: every good row is stored, each refused one is set aside (with its reason), and none is dropped.
            Assert.Equal(1 + rows.Count - spoiled.Count, await store.CountPredictionsAsync(Renewal));
            Assert.Equal(spoiled.Count, log.SetAside);
            Assert.Equal(0, log.Dropped);
            Assert.Equal(rows.Count - spoiled.Count, log.Written);
            var lines = Directory.GetFiles(folder).SelectMany(File.ReadAllLines).Select(l => JsonDocument.Parse(l).RootElement).ToList();
            Assert.Equal(spoiled.Count, lines.Count);
            foreach (var (at, why) in spoiled)
            {
                var line = Assert.Single(lines, l => l.GetProperty("id").GetGuid() == rows[at].Id && l.GetProperty("scoredAt").GetDateTimeOffset() == rows[at].ScoredAt);
                Assert.False(string.IsNullOrWhiteSpace(line.GetProperty("reason").GetString()), why);
                Assert.Equal(rows[at].FeaturesJson, line.GetProperty("features").GetString());
            }

            Assert.NotNull(await store.GetPredictionAsync(rows[136].Id));
            Assert.NotNull(await store.GetPredictionAsync(rows[138].Id));
            Assert.NotNull(await store.GetPredictionAsync(rows[^1].Id));
        }
        finally
        {
            if (Directory.Exists(folder))
            {
                Directory.Delete(folder, recursive: true);
            }
        }
    }
}
