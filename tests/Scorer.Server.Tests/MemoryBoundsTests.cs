using System.Globalization;
using System.Net;
using System.Text;
using System.Text.Json;
using System.Text.Json.Nodes;
using Microsoft.Extensions.DependencyInjection;
using Microsoft.Extensions.Logging;
using Microsoft.Extensions.Logging.Abstractions;
using Microsoft.Extensions.Time.Testing;
using Scorer.Engine.Scoring;
using Scorer.Monitor.Reporting;
using Scorer.Registry;
using Scorer.Store;
using Scorer.Store.Sqlite;

namespace Scorer.Server.Tests;

/// <summary>
/// Every in-memory structure that grows with traffic or with the versions loaded holds at its bound (docs/operations.md,
/// "Memory bounds"): filled past it, its size stays at the bound and exactly the excess is counted as dropped; a version
/// that leaves the live and shadow stages leaves the scrape.
/// </summary>
public sealed class MemoryBoundsTests : IDisposable
{
    private const string Model = "pump-bearing-failure";
    private const string Live = "2026.11.1";
    private const string Shadow = "2026.12.1";
    private const string PumpRow = "{\"rows\":[{\"vibration_rms\":3.2,\"bearing_temp_c\":61,\"hours_since_service\":2500,\"site\":\"river\"}]}";
    private static readonly DateTimeOffset T0 = new(2026, 6, 1, 0, 0, 0, TimeSpan.Zero);
    private static readonly TimeSpan Bound = TimeSpan.FromSeconds(60);
    private readonly TestFolder _folder = new();

    public void Dispose() => _folder.Dispose();

    /// <summary>Records the event ids logged through it.</summary>
    private sealed class RecordingLogger<T> : ILogger<T>
    {
        private readonly Lock _lock = new();
        private readonly List<(int Id, string Message)> _events = [];

        public IReadOnlyList<(int Id, string Message)> Events
        {
            get
            {
                lock (_lock)
                {
                    return [.. _events];
                }
            }
        }

        public IDisposable? BeginScope<TState>(TState state) where TState : notnull => null;

        public bool IsEnabled(LogLevel logLevel) => true;

        public void Log<TState>(LogLevel logLevel, EventId eventId, TState state, Exception? exception, Func<TState, Exception?, string> formatter)
        {
            lock (_lock)
            {
                _events.Add((eventId.Id, formatter(state, exception)));
            }
        }
    }

    private static NamedValue[] Row(double vibration) =>
    [
        new("vibration_rms", FeatureValue.Of(vibration)), new("bearing_temp_c", FeatureValue.Of(61)), new("hours_since_service", FeatureValue.Of(2500)),
        new("site", FeatureValue.Of("river")),
    ];

    private static ShadowWork Work(LoadedVersion shadow, int rows) =>
        new([shadow], [.. Enumerable.Range(0, rows).Select(i => Row(2 + (0.1 * i)))], [.. Enumerable.Range(0, rows).Select(_ => Guid.CreateVersion7())],
            new string?[rows], T0);

    private void AddTwoVersions()
    {
        _folder.AddModel(Files.Example("pump-bearings"), "pump.json");
        var json = JsonNode.Parse(File.ReadAllText(Files.Example("pump-bearings")))!;
        json["version"] = Shadow;
        _folder.WriteModel("pump-v2.json", json.ToJsonString());
    }

    /// <summary>The shadow scorer on its own, not started, over a real SQLite store and registry, with a fake clock.</summary>
    private async Task<(ShadowScorer Scorer, LoadedVersion Version, RecordingLogger<ShadowScorer> Logger, Func<Task> Close)> ShadowScorerAsync(ScoringLimits limits)
    {
        _folder.AddModel(Files.Example("pump-bearings"), "pump.json");
        var store = SqliteScorerStore.ForFile(_folder.Store);
        await store.MigrateAsync();
        var time = new FakeTimeProvider(T0);
        var registry = new ModelRegistry(new RegistryOptions { ModelsPath = _folder.Models }, store, time, NullLogger<ModelRegistry>.Instance);
        var version = (await registry.ReloadAsync()).Find(Model)!.Live!;
        var log = new PredictionLog(store, new PredictionLogOptions(), NullLogger<PredictionLog>.Instance);
        var logger = new RecordingLogger<ShadowScorer>();
        var scorer = new ShadowScorer(log, time, logger, new DriftTracker(store, time), limits);
        return (scorer, version, logger, async () =>
        {
            await scorer.DisposeAsync();
            await log.StopAsync();
            await store.DisposeAsync();
        });
    }

    [Fact]
    public async Task The_shadow_queue_holds_its_bound_of_batches_counts_exactly_the_excess_as_dropped_and_scores_every_batch_it_took()
    {
        var (scorer, version, logger, close) = await ShadowScorerAsync(new ScoringLimits { ShadowQueueBatches = 5, ShadowQueueRows = 1_000 });
        try
        {
            // Arrange and act: the loop has not started, so nothing leaves the queue; 8 batches of 3 rows arrive.
            for (var i = 0; i < 8; i++)
            {
                scorer.Enqueue(Work(version, 3));
            }

            // Assert: 5 batches (15 rows) held, the 3 beyond counted with their 9 rows, the first drop logged once.
            Assert.Equal(5, scorer.Batches);
            Assert.Equal(15, scorer.Rows);
            Assert.Equal(3, scorer.Dropped);
            Assert.Equal(9, scorer.DroppedRows);
            Assert.Equal(1, logger.Events.Count(e => e.Id == 5002));

            // Every batch taken is scored once the loop runs.
            scorer.Start();
            Assert.True(await Files.EventuallyAsync(() => Task.FromResult(scorer.Scored == 15), Bound), $"{scorer.Scored} of 15 shadow rows scored");
            Assert.Equal(0, scorer.Batches);
            Assert.Equal(0, scorer.Rows);
            Assert.Equal(3, scorer.Dropped);
        }
        finally
        {
            await close();
        }
    }

    [Fact]
    public async Task The_shadow_queue_holds_its_bound_of_rows_and_a_batch_that_would_pass_it_is_dropped_whole_and_counted()
    {
        var (scorer, version, logger, close) = await ShadowScorerAsync(new ScoringLimits { ShadowQueueBatches = 100, ShadowQueueRows = 10 });
        try
        {
            for (var i = 0; i < 4; i++)
            {
                scorer.Enqueue(Work(version, 3)); // 3, 6, 9 rows; the fourth would make 12
            }

            scorer.Enqueue(Work(version, 1)); // 10: fits exactly
            scorer.Enqueue(Work(version, 1)); // 11: dropped

            Assert.Equal(4, scorer.Batches);
            Assert.Equal(10, scorer.Rows);
            Assert.Equal(2, scorer.Dropped);
            Assert.Equal(4, scorer.DroppedRows);
            Assert.Equal(1, logger.Events.Count(e => e.Id == 5002));
            Assert.Contains("1 batches (3 rows) so far", logger.Events.Single(e => e.Id == 5002).Message, StringComparison.Ordinal); // the first drop
        }
        finally
        {
            await close();
        }
    }

    [Fact]
    public async Task Drift_tallies_stay_at_their_bound_count_exactly_the_rows_beyond_and_make_room_once_the_store_has_them()
    {
        // Arrange: the real server on a fake clock (its flush loop moves only when the clock does), at most 3 tallies.
        AddTwoVersions();
        var time = new FakeTimeProvider(T0);
        await using var server = await RunningServer.StartAsync(_folder, new Dictionary<string, string?> { ["Scorer:Limits:MaxDriftTallies"] = "3" },
            s => s.AddSingleton<TimeProvider>(time));
        var drift = server.Service<DriftTracker>();
        var version = server.Service<ModelRegistry>().Current.Find(Model)!.Live!;

        // Act: 2 rows in each of 5 hours (this hour and the 4 after it), then 2 more in the first hour.
        for (var h = 0; h < 5; h++)
        {
            Tally(T0.AddHours(h), 2);
        }

        Tally(T0.AddMinutes(30), 2);

        // Assert: 3 tallies held, the 2 hours beyond refused with their 4 rows; the held hour still took its 2 rows.
        Assert.Equal(3, drift.Tallies);
        Assert.Equal(2, drift.DroppedTallies);
        Assert.Equal(4, drift.DroppedRows);
        var text = await server.Http.GetStringAsync("/metrics");
        Assert.Contains("\nscorer_memory_drift_tallies 3\n", text, StringComparison.Ordinal);
        Assert.Contains("\nscorer_memory_drift_dropped_rows_total 4\n", text, StringComparison.Ordinal);

        // Once the store has the counts and their hours are over, the tallies go and new hours are taken again.
        time.Advance(TimeSpan.FromHours(10));
        await drift.FlushAsync();
        Assert.Equal(0, drift.Tallies);
        var stored = await server.Service<IDriftCountStore>().GetDriftCountsAsync(Model, Live, T0, T0.AddHours(10));
        Assert.Equal(8, stored.Where(c => c.Series == DriftTracker.ScoreSeries).Sum(c => c.Rows)); // 2 + 2 in hour 0, 2 in hour 1, 2 in hour 2
        Tally(T0.AddHours(10), 1);
        Assert.Equal(1, drift.Tallies);
        Assert.Equal(4, drift.DroppedRows);

        void Tally(DateTimeOffset at, int rows)
        {
            var tally = drift.Begin(version, at)!;
            for (var i = 0; i < rows; i++)
            {
                var row = Row(3.2);
                tally.Add(version.Compiled.Score(row, ScoreSettings.PointOnly).Eta, row);
            }

            tally.Commit();
        }
    }

    [Fact]
    public async Task The_process_memory_gauges_agree_with_the_kernel_and_sqlite_stays_within_its_page_cache_settings()
    {
        // The server runs in this test process, so the kernel's VmRSS (/proc/self/status) is the same process's resident
        // memory; the two are read moments apart, so they agree loosely (within a factor of 1.5).
        _folder.AddModel(Files.Example("pump-bearings"), "pump.json");
        await using var server = await RunningServer.StartAsync(_folder, new Dictionary<string, string?>
        {
            ["Scorer:Store:WriteCacheMegabytes"] = "16",
            ["Scorer:Store:ReadCacheMegabytes"] = "2",
        });
        await ScoreAsync(server, Live);
        var text = await server.Http.GetStringAsync("/metrics");
        var vmRss = long.Parse(File.ReadAllLines("/proc/self/status").First(l => l.StartsWith("VmRSS:", StringComparison.Ordinal))
            .Split(' ', StringSplitOptions.RemoveEmptyEntries)[1], CultureInfo.InvariantCulture) * 1024;
        double Gauge(string name) => double.Parse(text.Split('\n').First(l => l.StartsWith(name + " ", StringComparison.Ordinal)).Split(' ')[1],
            CultureInfo.InvariantCulture);

        Assert.InRange(Gauge("scorer_memory_resident_bytes"), vmRss / 1.5, vmRss * 1.5);
        Assert.InRange(Gauge("scorer_memory_managed_heap_bytes"), 1, Gauge("scorer_memory_managed_committed_bytes"));
        // SQLite's own count of its memory: above zero once it has read the store, and within the write cache plus a
        // read cache for each of a few reads at once (with room for its statement memory).
        Assert.InRange(Gauge("scorer_memory_store_cache_bytes"), 1, (16 + (2 * 8) + 8) << 20);
    }

    [Fact]
    public async Task Retiring_a_version_removes_its_series_from_the_scrape_and_its_rows_stay_counted_under_its_model()
    {
        // Arrange: a live and a shadow version, each scored by name, both with series of their own.
        AddTwoVersions();
        await using var server = await RunningServer.StartAsync(_folder);
        await ScoreAsync(server, Shadow);
        await ScoreAsync(server, Live);
        var text = "";
        Assert.True(await Files.EventuallyAsync(async () =>
        {
            text = await server.Http.GetStringAsync("/metrics");
            return text.Contains($"scorer_rows_scored_total{{model=\"{Model}\",version=\"{Shadow}\",stage=\"shadow\"}} 1", StringComparison.Ordinal)
                && text.Contains($"scorer_monitor_status{{model=\"{Model}\",version=\"{Shadow}\"}}", StringComparison.Ordinal)
                && text.Contains("\nscorer_memory_chart_versions 2\n", StringComparison.Ordinal);
        }, Bound), text);
        Assert.Contains("\nscorer_memory_metric_versions 2\n", text, StringComparison.Ordinal);

        // Act: the shadow version is retired.
        using (var retire = new StringContent("{\"stage\":\"retired\"}", Encoding.UTF8, "application/json"))
        {
            Assert.Equal(HttpStatusCode.OK, (await server.Http.PostAsync($"/v1/models/{Model}/versions/{Shadow}/stage", retire)).StatusCode);
        }

        // Assert: no series names it any more; its row is counted under its model with version "", the charts let it go.
        Assert.True(await Files.EventuallyAsync(async () =>
        {
            text = await server.Http.GetStringAsync("/metrics");
            return !text.Contains($"version=\"{Shadow}\"", StringComparison.Ordinal) && text.Contains("\nscorer_memory_chart_versions 1\n", StringComparison.Ordinal);
        }, Bound), text);
        Assert.Contains($"scorer_rows_scored_total{{model=\"{Model}\",version=\"\",stage=\"shadow\"}} 1", text, StringComparison.Ordinal);
        Assert.Contains($"scorer_rows_scored_total{{model=\"{Model}\",version=\"{Live}\",stage=\"live\"}} 1", text, StringComparison.Ordinal);
        Assert.Contains("\nscorer_memory_metric_versions 1\n", text, StringComparison.Ordinal);

        // A retired version scored by name is counted there too, and gets no series of its own back.
        await ScoreAsync(server, Shadow);
        Assert.True(await Files.EventuallyAsync(async () =>
        {
            text = await server.Http.GetStringAsync("/metrics");
            return text.Contains($"scorer_rows_scored_total{{model=\"{Model}\",version=\"\",stage=\"retired\"}} 1", StringComparison.Ordinal);
        }, Bound), text);
        Assert.DoesNotContain($"version=\"{Shadow}\"", text, StringComparison.Ordinal);
    }

    [Fact]
    public async Task Beyond_the_bound_on_metric_versions_a_shadow_version_gets_no_series_of_its_own_and_its_rows_are_counted_under_its_model()
    {
        AddTwoVersions();
        await using var server = await RunningServer.StartAsync(_folder, new Dictionary<string, string?> { ["Scorer:Limits:MaxMetricVersions"] = "1" });
        await ScoreAsync(server, Shadow);
        await ScoreAsync(server, Shadow);
        await ScoreAsync(server, Live);

        var text = "";
        Assert.True(await Files.EventuallyAsync(async () =>
        {
            text = await server.Http.GetStringAsync("/metrics");
            return text.Contains($"scorer_rows_scored_total{{model=\"{Model}\",version=\"\",stage=\"shadow\"}} 2", StringComparison.Ordinal)
                && text.Contains($"scorer_monitor_status{{model=\"{Model}\",version=\"{Live}\"}}", StringComparison.Ordinal);
        }, Bound), text);
        Assert.Contains($"scorer_rows_scored_total{{model=\"{Model}\",version=\"{Live}\",stage=\"live\"}} 1", text, StringComparison.Ordinal);
        Assert.DoesNotContain($"version=\"{Shadow}\"", text, StringComparison.Ordinal);
        Assert.Contains("\nscorer_memory_metric_versions 1\n", text, StringComparison.Ordinal);
        Assert.Contains("\nscorer_memory_metric_versions_left_out 1\n", text, StringComparison.Ordinal);
    }

    [Fact]
    public async Task A_shadow_queue_smaller_than_one_full_message_is_refused_at_start_naming_the_setting()
    {
        _folder.AddModel(Files.Example("pump-bearings"), "pump.json");
        var error = await Assert.ThrowsAnyAsync<Exception>(() => RunningServer.StartAsync(_folder,
            new Dictionary<string, string?> { ["Scorer:Limits:ShadowQueueRows"] = "500", ["Scorer:Limits:MaxRows"] = "1000" }));
        Assert.Contains("Scorer:Limits:ShadowQueueRows is 500, below Scorer:Limits:MaxRows (1000)", error.Message, StringComparison.Ordinal);
    }

    private static async Task ScoreAsync(RunningServer server, string version)
    {
        using var content = new StringContent(PumpRow.Insert(1, $"\"version\":\"{version}\","), Encoding.UTF8, "application/json");
        using var response = await server.Http.PostAsync($"/v1/models/{Model}/score", content);
        var body = await response.Content.ReadAsStringAsync();
        Assert.True(response.StatusCode == HttpStatusCode.OK, body);
        using var json = JsonDocument.Parse(body);
        Assert.Equal(version, json.RootElement.GetProperty("version").GetString());
    }
}
