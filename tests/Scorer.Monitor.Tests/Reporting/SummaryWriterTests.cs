using Microsoft.Extensions.Logging.Abstractions;
using Microsoft.Extensions.Time.Testing;
using Scorer.Monitor.Reporting;
using Scorer.Statistics.Summaries;
using Scorer.Store;
using Scorer.Store.Sqlite;

namespace Scorer.Monitor.Tests.Reporting;

/// <summary>
/// The summaries' writer against a real SQLite store on a fake clock: after new outcomes, changed ones (take latest),
/// late ones for old days and implicit negatives, every stored bucket holds exactly the store's labelled rows of its
/// time range, hour buckets become day buckets once their day is old enough, and a row cache bounded by ExactRows
/// evicts its oldest rows and says which windows it no longer holds whole.
/// </summary>
public sealed class SummaryWriterTests : IAsyncLifetime
{
    private const string Model = "pump-bearing-failure";
    private const string Version = "1";
    private static readonly DateTimeOffset T0 = new(2026, 6, 1, 0, 0, 0, TimeSpan.Zero);
    private readonly string _folder = Path.Combine(Path.GetTempPath(), "scorer-summaries-" + Guid.NewGuid().ToString("N"));
    private readonly FakeTimeProvider _clock = new(T0.AddDays(6));
    private SqliteScorerStore _store = null!;

    public async Task InitializeAsync()
    {
        Directory.CreateDirectory(_folder);
        _store = SqliteScorerStore.ForFile(Path.Combine(_folder, "scorer.db"), new SqliteStoreOptions(), _clock);
        await _store.MigrateAsync();
    }

    public async Task DisposeAsync()
    {
        await _store.DisposeAsync();
        Directory.Delete(_folder, recursive: true);
    }

    private SummaryWriter Writer(int pageRows = 700) =>
        new(null!, _store, _store, _store, new MonitorOptions { SummaryPageRows = pageRows }, _clock, NullLogger<SummaryWriter>.Instance);

    [Fact]
    public async Task Every_bucket_holds_exactly_the_stores_rows_after_new_changed_late_and_implicit_outcomes()
    {
        // Invented rows: 3,000 predictions over 6 days, seeded, p with ties (3 places).
        var random = new Random(11);
        var predictions = Enumerable.Range(0, 3000).Select(i =>
        {
            var p = Math.Round(0.001 + 0.998 * random.NextDouble(), 3);
            var at = T0.AddMinutes(i * 2.88);
            return new PredictionRecord(Guid.CreateVersion7(at), Model, Version, Stage.Live, at, null, Math.Log(p / (1 - p)), p, "{}");
        }).ToArray();
        await _store.WritePredictionsAsync(predictions);
        var writer = Writer();
        var order = Enumerable.Range(0, predictions.Length).ToArray();
        random.Shuffle(order);
        var versions = new[] { (Model, Version) };

        await Record(order.Take(1800).Select(i => new OutcomeReport(predictions[i].Id, null, (byte)(random.NextDouble() < predictions[i].Probability ? 1 : 0))));
        await writer.CatchUpAsync(versions, CancellationToken.None);
        await CheckBuckets();

        // Changed outcomes (some of them for days already in day buckets), and new late ones.
        await Record(order.Take(400).Select(i => new OutcomeReport(predictions[i].Id, null, (byte)random.Next(2)))
            .Concat(order.Skip(1800).Take(600).Select(i => new OutcomeReport(predictions[i].Id, null, (byte)random.Next(2)))));
        await writer.CatchUpAsync(versions, CancellationToken.None);
        await CheckBuckets();

        while (await _store.RecordImplicitNegativesAsync(Model, T0.AddDays(5), _clock.GetUtcNow()) > 0)
        {
        }

        await writer.CatchUpAsync(versions, CancellationToken.None);
        var hoursBefore = (await _store.GetSummariesAsync(Model, Version, -1)).Count(b => b.Length == TimeSpan.FromHours(1));
        Assert.True(hoursBefore > 24, $"{hoursBefore} hour buckets");
        await CheckBuckets();

        // Two days later every day but the last two is a day bucket; a new writer (as after a restart) continues from the store.
        _clock.Advance(TimeSpan.FromDays(2));
        await Record(order.Skip(2400).Select(i => new OutcomeReport(predictions[i].Id, null, 1)));
        await Writer(pageRows: 50_000).CatchUpAsync(versions, CancellationToken.None);
        var stored = await _store.GetSummariesAsync(Model, Version, -1);
        Assert.All(stored, b => Assert.Equal(TimeSpan.FromDays(1), b.Length));
        Assert.Equal(6, stored.Count);
        await CheckBuckets();

        async Task Record(IEnumerable<OutcomeReport> reports) =>
            await _store.RecordOutcomesAsync(Model, [.. reports], ConflictPolicy.TakeLatest, _clock.GetUtcNow());
    }

    /// <summary>Each stored bucket against the store's labelled rows of its range; together they hold every labelled row.</summary>
    private async Task CheckBuckets()
    {
        long total = 0;
        foreach (var bucket in await _store.GetSummariesAsync(Model, Version, -1))
        {
            var rows = await _store.GetLabelledAsync(Model, Version, bucket.Start, bucket.Start + bucket.Length);
            var expected = new LabelledSummary();
            foreach (var row in rows)
            {
                expected.Add(row.Probability, row.Outcome);
            }

            var summary = LabelledSummary.Read(bucket.Summary);
            Assert.Equal(expected.Count, summary.Count);
            Assert.Equal(expected.Events, summary.Events);
            Assert.Equal(expected.SumP, summary.SumP, 1e-9);
            Assert.Equal(expected.SpiegelhalterNumerator, summary.SpiegelhalterNumerator, 1e-9);
            Assert.Equal(expected.OccupiedBins, summary.OccupiedBins);
            total += summary.Count;
        }

        Assert.Equal((await _store.GetLabelledAsync(Model, Version, DateTimeOffset.UnixEpoch, T0.AddYears(1))).Count, total);
    }

    [Fact]
    public async Task A_new_row_cache_loads_only_the_newest_buckets_that_fit_and_then_follows_the_feed()
    {
        // 96 hours of 10 rows each, labelled; the summaries written; then a fresh cache (as after a restart) with room for 250.
        var predictions = Enumerable.Range(0, 960).Select(i =>
        {
            var at = T0.AddDays(2).AddMinutes(i * 6);
            var p = 0.05 + 0.9 * (i * 7919 % 960) / 960.0;
            return new PredictionRecord(Guid.CreateVersion7(at), Model, Version, Stage.Live, at, null, Math.Log(p / (1 - p)), p, "{}");
        }).ToArray();
        await _store.WritePredictionsAsync(predictions);
        await _store.RecordOutcomesAsync(Model, [.. predictions.Take(900).Select((p, i) => new OutcomeReport(p.Id, null, (byte)(i % 4 == 0 ? 1 : 0)))],
            ConflictPolicy.TakeLatest, _clock.GetUtcNow());
        _clock.SetUtcNow(T0.AddDays(6));
        await Writer().CatchUpAsync([(Model, Version)], CancellationToken.None);
        // After the summaries' save: 60 more outcomes, which only the feed has.
        await _store.RecordOutcomesAsync(Model, [.. predictions.Skip(900).Select(p => new OutcomeReport(p.Id, null, 1))], ConflictPolicy.TakeLatest, _clock.GetUtcNow());

        var cache = new LabelledCache(_store, new MonitorOptions { ExactRows = 250 }, new SummaryReader(_store));
        var buckets = (await _store.GetSummariesAsync(Model, Version, -1)).OrderByDescending(b => b.Start).ToList();
        // The newest buckets (hours of 10 rows, and whole days) whose rows fit 250.
        long held = 0;
        var since = buckets[0].Start;
        foreach (var b in buckets)
        {
            var count = LabelledSummary.Read(b.Summary).Count;
            if (held + count > 250)
            {
                break;
            }

            held += count;
            since = b.Start;
        }

        using (var recent = await cache.WindowAsync(Model, Version, since, T0.AddDays(30)))
        {
            Assert.True(recent.Complete);
            var rows = await _store.GetLabelledAsync(Model, Version, since, T0.AddDays(30));
            Assert.Equal(rows.Select(r => r.Probability).Order(), recent.Probability.ToArray());
        }

        Assert.InRange(cache.Rows, 1, held + 60);
        using var older = await cache.WindowAsync(Model, Version, since.AddHours(-1), T0.AddDays(30));
        Assert.False(older.Complete);
    }

    [Fact]
    public async Task The_row_cache_keeps_the_newest_exact_rows_and_says_which_windows_it_no_longer_holds_whole()
    {
        var predictions = Enumerable.Range(0, 2000).Select(i =>
        {
            var at = T0.AddMinutes(i);
            var p = 0.05 + 0.9 * (i * 7919 % 2000) / 2000.0;
            return new PredictionRecord(Guid.CreateVersion7(at), Model, Version, Stage.Live, at, null, Math.Log(p / (1 - p)), p, "{}");
        }).ToArray();
        await _store.WritePredictionsAsync(predictions);
        await _store.RecordOutcomesAsync(Model, [.. predictions.Select((p, i) => new OutcomeReport(p.Id, null, (byte)(i % 3 == 0 ? 1 : 0)))],
            ConflictPolicy.TakeLatest, _clock.GetUtcNow());
        var cache = new LabelledCache(_store, new MonitorOptions { ExactRows = 500 });

        // 2,000 rows against a bound of 500 (+ a quarter): the oldest 1,500 go.
        using (var all = await cache.WindowAsync(Model, Version, T0, T0.AddDays(2)))
        {
            Assert.False(all.Complete);
            Assert.Equal(500, all.Count);
        }

        Assert.Equal(500, cache.Rows);
        using var recent = await cache.WindowAsync(Model, Version, T0.AddMinutes(1500), T0.AddDays(2));
        Assert.True(recent.Complete);
        Assert.Equal(500, recent.Count);
        var rows = await _store.GetLabelledAsync(Model, Version, T0.AddMinutes(1500), T0.AddDays(2));
        Assert.Equal(rows.Select(r => r.Probability).Order(), recent.Probability.ToArray());
    }
}
