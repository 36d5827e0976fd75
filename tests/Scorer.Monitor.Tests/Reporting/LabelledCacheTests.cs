using Scorer.Monitor.Reporting;
using Scorer.Statistics;
using Scorer.Store;
using Scorer.Store.Sqlite;

namespace Scorer.Monitor.Tests.Reporting;

/// <summary>
/// The monitor's row cache against the store it mirrors (a real SQLite file): after any sequence of new outcomes,
/// relabelled ones and implicit negatives, every window holds exactly the rows the store's own labelled query returns,
/// in ascending order of p, and the report over them equals Compute over the store's rows.
/// </summary>
public sealed class LabelledCacheTests : IAsyncLifetime
{
    private const string Model = "pump-bearing-failure";
    private const string Version = "1";
    private static readonly DateTimeOffset T0 = new(2026, 6, 1, 0, 0, 0, TimeSpan.Zero);
    private readonly string _folder = Path.Combine(Path.GetTempPath(), "scorer-cache-" + Guid.NewGuid().ToString("N"));
    private SqliteScorerStore _store = null!;

    public async Task InitializeAsync()
    {
        Directory.CreateDirectory(_folder);
        _store = SqliteScorerStore.ForFile(Path.Combine(_folder, "scorer.db"));
        await _store.MigrateAsync();
    }

    public async Task DisposeAsync()
    {
        await _store.DisposeAsync();
        Directory.Delete(_folder, recursive: true);
    }

    [Fact]
    public async Task Windows_hold_exactly_the_stores_labelled_rows_after_new_relabelled_and_implicit_outcomes()
    {
        // Invented rows: 3,000 predictions over 30 days, seeded; p drawn with many ties (rounded to 3 places).
        var random = new Random(7);
        var predictions = Enumerable.Range(0, 3000).Select(i =>
        {
            var p = Math.Round(random.NextDouble(), 3);
            return new PredictionRecord(Guid.CreateVersion7(T0.AddMinutes(i * 14)), Model, Version, Stage.Live, T0.AddMinutes(i * 14), "WO-" + i,
                Math.Log(p / (1 - p + 1e-9) + 1e-9), p, "{}");
        }).ToArray();
        await _store.WritePredictionsAsync(predictions);
        var cache = new LabelledCache(_store, new MonitorOptions());
        var now = T0.AddDays(60);

        // Round 1: outcomes for a shuffled half. Round 2: some of them changed (take latest) and more new ones.
        // Round 3: implicit negatives for the first 20 days.
        var order = Enumerable.Range(0, predictions.Length).ToArray();
        random.Shuffle(order);
        await Record(order.Take(1500).Select(i => new OutcomeReport(predictions[i].Id, null, (byte)(random.NextDouble() < predictions[i].Probability ? 1 : 0))));
        await CheckAllWindows(cache);
        await Record(order.Take(300).Select(i => new OutcomeReport(predictions[i].Id, null, (byte)random.Next(2)))
            .Concat(order.Skip(1500).Take(700).Select(i => new OutcomeReport(predictions[i].Id, null, (byte)random.Next(2)))));
        await CheckAllWindows(cache);
        while (await _store.RecordImplicitNegativesAsync(Model, T0.AddDays(20), now) > 0)
        {
        }

        await CheckAllWindows(cache);

        async Task Record(IEnumerable<OutcomeReport> reports) =>
            await _store.RecordOutcomesAsync(Model, [.. reports], ConflictPolicy.TakeLatest, now);
    }

    [Fact]
    public async Task The_fingerprint_stays_while_nothing_changes_and_moves_when_an_outcome_changes()
    {
        var a = new PredictionRecord(Guid.CreateVersion7(T0), Model, Version, Stage.Live, T0, null, -1, 0.27, "{}");
        var b = new PredictionRecord(Guid.CreateVersion7(T0.AddHours(1)), Model, Version, Stage.Live, T0.AddHours(1), null, 1, 0.73, "{}");
        await _store.WritePredictionsAsync([a, b]);
        await _store.RecordOutcomesAsync(Model, [new OutcomeReport(a.Id, null, 1), new OutcomeReport(b.Id, null, 0)], ConflictPolicy.TakeLatest, T0.AddDays(1));
        var cache = new LabelledCache(_store, new MonitorOptions());

        var first = await Fingerprint(T0, T0.AddDays(1));
        Assert.Equal(first, await Fingerprint(T0, T0.AddDays(1)));
        Assert.NotEqual(first, await Fingerprint(T0.AddMinutes(30), T0.AddDays(1))); // a narrower window holds other rows

        await _store.RecordOutcomesAsync(Model, [new OutcomeReport(b.Id, null, 1)], ConflictPolicy.TakeLatest, T0.AddDays(2));
        Assert.NotEqual(first, await Fingerprint(T0, T0.AddDays(1)));
        using var window = await cache.WindowAsync(Model, Version, T0, T0.AddDays(1));
        Assert.Equal([1, 1], window.Outcome.ToArray());

        async Task<(long, int, ulong)> Fingerprint(DateTimeOffset from, DateTimeOffset to)
        {
            using var w = await cache.WindowAsync(Model, Version, from, to);
            return w.Fingerprint;
        }
    }

    private async Task CheckAllWindows(LabelledCache cache)
    {
        var windows = new (DateTimeOffset From, DateTimeOffset To)[]
        {
            (DateTimeOffset.UnixEpoch, T0.AddYears(1)), (T0.AddDays(5), T0.AddDays(12)), (T0.AddDays(29), T0.AddDays(31)), (T0.AddDays(40), T0.AddDays(41)),
        };
        foreach (var (from, to) in windows)
        {
            var stored = await _store.GetLabelledAsync(Model, Version, from, to);
            using var window = await cache.WindowAsync(Model, Version, from, to);
            Assert.Equal(stored.Count, window.Count);
            for (var i = 1; i < window.Count; i++)
            {
                Assert.True(window.Probability[i - 1] <= window.Probability[i], $"rows {i - 1} and {i} are out of p order");
            }

            // The same multiset of (p, y) pairs.
            var expected = stored.Select(r => (r.Probability, r.Outcome)).Order().ToArray();
            var actual = Enumerable.Range(0, window.Count).Select(i => (window.Probability[i], window.Outcome[i])).Order().ToArray();
            Assert.Equal(expected, actual);
            if (stored.Count > 0)
            {
                var exact = CalibrationStatistics.Compute([.. stored.Select(r => r.Probability)], [.. stored.Select(r => r.Outcome)]);
                var cached = CalibrationStatistics.ComputeSorted(window.Probability, window.Outcome);
                Assert.Equal(exact.Events, cached.Events);
                Assert.Equal(exact.Brier, cached.Brier, 1e-12);
                Assert.Equal(exact.Auc?.Estimate, cached.Auc?.Estimate);
            }
        }
    }
}
