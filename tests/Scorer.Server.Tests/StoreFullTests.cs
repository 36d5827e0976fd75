using Scorer.Host;
using System.Net;
using System.Text;
using Grpc.Core;
using Microsoft.Data.Sqlite;
using Microsoft.Extensions.DependencyInjection;
using Scorer.Store;
using Scorer.Transport;

namespace Scorer.Server.Tests;

/// <summary>
/// The SQLite store out of room, as on a full disk: SQLite refuses writes beyond the file's limit
/// (<c>Scorer:Store:MaxSizeMegabytes</c>) with the same SQLITE_FULL it gives when the disk is full. Reads still work, so
/// only the store's own account of its refused writes can tell readiness and the metrics.
/// </summary>
public sealed class StoreFullTests : IAsyncLifetime
{
    private const string Model = "pump-bearing-failure";

    private readonly TestFolder _folder = new();
    private readonly MovableClock _clock = new();
    private RunningServer _server = null!;

    public async Task InitializeAsync()
    {
        _folder.AddModel(Files.Example("pump-bearings"), "pump.json");
        _server = await RunningServer.StartAsync(_folder, new Dictionary<string, string?> { ["Scorer:Store:MaxSizeMegabytes"] = "1" },
            services => services.AddSingleton<TimeProvider>(_clock));
    }

    public async Task DisposeAsync()
    {
        await _server.DisposeAsync();
        _folder.Dispose();
    }

    [Fact]
    public async Task Readiness_and_the_metrics_say_the_store_is_full_naming_the_cause_until_a_write_succeeds_again()
    {
        Assert.Equal("ready\n", await _server.Http.GetStringAsync("/readyz"));
        Assert.Contains("scorer_store_full 0", await _server.Http.GetStringAsync("/metrics"), StringComparison.Ordinal);

        // About 250 bytes a logged row: a few thousand fit in 1 MiB. Rows go in 500 at a time, each lot written before the
        // next is sent, until one does not fit: then exactly that lot waits, and it fits once the operator makes room.
        var log = _server.Service<PredictionLog>();
        var sent = 0;
        while (log.FailedWrites == 0)
        {
            Assert.True(sent < 20_000, "1 MiB held 20,000 rows: the size limit is not applied");
            var rows = Enumerable.Range(sent, 500)
                .Select(i => $"{{\"vibration_rms\":{2 + (i % 50) * 0.1:R},\"bearing_temp_c\":55,\"hours_since_service\":{100 + i},\"site\":\"river\"}}");
            var keys = Enumerable.Range(sent, 500).Select(i => $"\"work-order-{i:D8}\"");
            using var content = new StringContent($"{{\"rows\":[{string.Join(",", rows)}],\"keys\":[{string.Join(",", keys)}]}}", Encoding.UTF8, "application/json");
            using var scored = await _server.Http.PostAsync($"/v1/models/{Model}/score", content);
            Assert.Equal(HttpStatusCode.OK, scored.StatusCode); // scoring goes on
            sent += 500;
            Assert.True(await Files.EventuallyAsync(() => Task.FromResult(log.Pending == 0 || log.FailedWrites > 0), TimeSpan.FromSeconds(60)),
                $"the log neither wrote nor failed to write rows {sent - 500}-{sent}: pending {log.Pending}");
        }

        string? reasons = null;
        Assert.True(await Files.EventuallyAsync(async () =>
        {
            reasons = await _server.Http.GetStringAsync("/readyz");
            return reasons.StartsWith("degraded: store full since ", StringComparison.Ordinal);
        }, TimeSpan.FromSeconds(60)), $"readiness did not notice the full store: {reasons}");
        using (var ready = await _server.Http.GetAsync("/readyz"))
        {
            Assert.Equal(HttpStatusCode.OK, ready.StatusCode); // degraded, not unready: traffic stays
        }

        Assert.Contains("database or disk is full", reasons, StringComparison.Ordinal); // SQLite's words for SQLITE_FULL
        Assert.Contains("limit of 1 MiB", reasons, StringComparison.Ordinal);
        Assert.Contains(Path.GetFileName(_folder.Store), reasons, StringComparison.Ordinal);
        var metrics = await _server.Http.GetStringAsync("/metrics");
        Assert.Contains("scorer_store_full 1", metrics, StringComparison.Ordinal);
        Assert.Matches(@"(?m)^scorer_store_full_writes_total [1-9]", metrics);

        // A call that meets it is Unavailable naming the store, and says why, without the file's path.
        var store = _server.Service<IScorerStore>();
        var big = Enumerable.Range(0, 2000).Select(i => new PredictionRecord(Guid.NewGuid(), Model, "2026.11.1", Stage.Live, DateTimeOffset.UnixEpoch.AddSeconds(i),
            $"direct-{i}", 0.1, 0.5, "{\"site\":\"" + new string('n', 400) + "\"}")).ToList();
        var refused = await Assert.ThrowsAsync<StoreFullException>(() => store.WritePredictionsAsync(big));
        var answer = StoreOutage.Answer(refused, StoreOutage.NothingRecorded);
        Assert.Equal(StatusCode.Unavailable, answer.StatusCode);
        Assert.StartsWith("store: has no room left for writes", answer.Status.Detail, StringComparison.Ordinal);
        Assert.Contains(StoreOutage.NothingRecorded, answer.Status.Detail, StringComparison.Ordinal);
        Assert.DoesNotContain(_folder.Root, answer.Status.Detail, StringComparison.Ordinal);

        // An operator makes room: the prediction log's next retry succeeds, and readiness and the metric clear.
        var logged = await store.CountPredictionsAsync(Model);
        await using (var connection = new SqliteConnection($"Data Source={_folder.Store};Pooling=False;Default Timeout=30"))
        {
            await connection.OpenAsync();
            await using var delete = connection.CreateCommand();
            delete.CommandText = "DELETE FROM predictions;";
            Assert.Equal(logged, await delete.ExecuteNonQueryAsync());
        }

        Assert.True(await Files.EventuallyAsync(async () => await store.CountPredictionsAsync(Model) == sent - logged, TimeSpan.FromSeconds(60)),
            $"the rows that waited in the prediction log were not written once there was room: {logged} logged before, {await store.CountPredictionsAsync(Model)} now; "
            + $"log written {log.Written}, failed writes {log.FailedWrites}, set aside {log.SetAside}, pending {log.Pending}, dropped {log.Dropped}");

        // Still said to be full for a minute after the last refusal (a small write that fits must not hide larger ones
        // that do not); then ready again.
        Assert.StartsWith("degraded: store full since ", await _server.Http.GetStringAsync("/readyz"), StringComparison.Ordinal);
        _clock.Ahead = Scorer.Store.Sqlite.SqliteScorerStore.FullHold;
        Assert.Equal("ready\n", await _server.Http.GetStringAsync("/readyz"));
        Assert.Contains("scorer_store_full 0", await _server.Http.GetStringAsync("/metrics"), StringComparison.Ordinal);
    }

    /// <summary>The system's clock, or as far ahead of it as the test has moved it; timers run as the system's.</summary>
    private sealed class MovableClock : TimeProvider
    {
        public TimeSpan Ahead { get; set; }

        public override DateTimeOffset GetUtcNow() => System.GetUtcNow() + Ahead;
    }
}

/// <summary>The setting of the SQLite file's size limit.</summary>
public sealed class StoreSizeSettingTests
{
    [Fact]
    public void A_size_limit_below_one_mebibyte_or_given_for_postgres_is_refused_naming_the_setting()
    {
        Assert.Empty(new ScorerOptions { Store = new StoreOptions { MaxSizeMegabytes = 1 } }.Validate());
        Assert.Contains(new ScorerOptions { Store = new StoreOptions { MaxSizeMegabytes = 0 } }.Validate(),
            p => p.StartsWith("Scorer:Store:MaxSizeMegabytes is 0; give a size in MiB of at least 1", StringComparison.Ordinal));
        Assert.Contains(new ScorerOptions { Store = new StoreOptions { Kind = "postgres", ConnectionString = "Host=db", MaxSizeMegabytes = 100 } }.Validate(),
            p => p.StartsWith("Scorer:Store:MaxSizeMegabytes limits the SQLite file", StringComparison.Ordinal));
    }
}
