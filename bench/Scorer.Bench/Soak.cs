using System.Diagnostics;
using System.Globalization;
using System.Text.Json;
using Microsoft.AspNetCore.Builder;
using Microsoft.AspNetCore.Hosting.Server;
using Microsoft.AspNetCore.Hosting.Server.Features;
using Microsoft.Extensions.Configuration;
using Microsoft.Extensions.DependencyInjection;
using Microsoft.Extensions.Time.Testing;
using Scorer.Host;
using Scorer.Store;

namespace Scorer.Bench;

/// <summary>
/// The soak (docs/performance.md "Soak"): the whole server (real Kestrel on 127.0.0.1, the store given: SQLite or
/// PostgreSQL) on a clock this process moves, with the store's retention at 30 days and every other setting at its
/// default. Labelled predictions are written with their prediction times through the server's own store (the same
/// instance the server uses, so no second connection pool), an hour of simulated time at a time: each hour's
/// predictions, then their outcomes (the horizon is one hour, outcomes are reported for every row), then the clock
/// moves on an hour. The stream is perfectly calibrated (each outcome drawn from the row's own p, seeded) until
/// <c>changeDay</c>, and from then on the odds of the event are doubled. At the end of each simulated day the driver
/// moves the clock on by the monitor's poll interval until the server's "all" report holds every outcome written and its
/// charts every matured one (states, not sleeps), then reads the server's resident memory, managed heap, SQLite's own
/// memory, the store's size on disk, the 30-day report's latency (median of 5) and method, and the status (judged over Scorer:Monitor:JudgedWindow, 30 days) with its reasons; the wall time with the part spent in the store writes and in the checks. From the
/// change on, the status is read after every simulated hour, and the first hour it leaves "fine" is printed.
/// The driver's own memory (one hour's rows, about 23,000 for 50 million over 90 days) is counted in the resident figure.
/// </summary>
public static class Soak
{
    private const string Model = "soak-line-fault";
    private const string Version = "1";
    private static readonly DateTimeOffset Start = new(2027, 1, 1, 0, 0, 0, TimeSpan.Zero);

    /// <summary>
    /// The monitor's poll interval in the soak: a simulated minute. The fake clock fires a periodic timer once per period
    /// passed, and the loops run inline, so at the default second every simulated hour would cost the charts and the
    /// summaries 3,600 rounds each.
    /// </summary>
    private static readonly TimeSpan Poll = TimeSpan.FromMinutes(1);

    /// <summary>
    /// The reports' refresh interval in the soak: 15 simulated minutes (default 15 s, which would be 240 refreshes of
    /// every window per simulated hour). The refresh's own cost is measured at each day's end.
    /// </summary>
    private static readonly TimeSpan Refresh = TimeSpan.FromMinutes(15);

    /// <param name="store">"sqlite", or a PostgreSQL connection string.</param>
    /// <param name="millions">Labelled predictions in all, in millions.</param>
    /// <param name="days">Simulated days of prediction time.</param>
    /// <param name="changeDay">The day from which the odds of the event are doubled.</param>
    public static async Task RunAsync(string store, int millions, int days, int changeDay)
    {
        var dir = Directory.CreateTempSubdirectory("scorer-soak-").FullName;
        var models = Path.Combine(dir, "models");
        Directory.CreateDirectory(models);
        await File.WriteAllTextAsync(Path.Combine(models, "soak.json"), ModelFile());
        var db = Path.Combine(dir, "scorer.db");
        var clock = new FakeTimeProvider(Start);
        string[] args = store == "sqlite"
            ? ["--models", models, "--store", db, "--http", "127.0.0.1:0", "--grpc", "127.0.0.1:0"]
            : ["--models", models, "--store-kind", "postgres", "--store-connection", store, "--http", "127.0.0.1:0", "--grpc", "127.0.0.1:0"];
        var app = await ScorerServer.BuildAsync(args, b =>
        {
            b.Configuration.AddInMemoryCollection(new Dictionary<string, string?>
            {
                ["Scorer:SeedDemoModels"] = "false",
                ["Scorer:LogLevel"] = "Warning",
                ["Scorer:Store:PredictionRetention"] = "30.00:00:00",
                ["Scorer:Store:OutcomeRetention"] = "30.00:00:00",
                ["Scorer:Monitor:PollInterval"] = Poll.ToString(),
                ["Scorer:Monitor:ReportInterval"] = Refresh.ToString(),
            });
            b.Services.AddSingleton<TimeProvider>(clock);
        });
        await app.StartAsync();
        var address = app.Services.GetRequiredService<IServer>().Features.Get<IServerAddressesFeature>()!.Addresses.First();
        using var http = new HttpClient { BaseAddress = new Uri(address), Timeout = TimeSpan.FromMinutes(2) };
        var predictions = app.Services.GetRequiredService<IPredictionLogStore>();
        var outcomes = app.Services.GetRequiredService<IOutcomeStore>();
        var total = millions * 1_000_000L;
        var hours = days * 24;
        var random = new Random(20261203);
        long written = 0;
        int? firstFlagged = null;
        var run = Stopwatch.StartNew();
        var writing = new Stopwatch(); // the day's store writes, through the server's own store
        var checking = new Stopwatch(); // the day's status reads and its checkpoint
        Console.WriteLine($"Soak: {total:N0} labelled predictions over {days} simulated days, odds doubled from day {changeDay}, store {(store == "sqlite" ? "SQLite" : "PostgreSQL")}, retention 30 days.");
        Console.WriteLine("| day | labelled | resident MB | managed heap MB | GC committed MB | SQLite MB | store MB | 30d report ms (median of 5) | refresh of all windows ms | method (30d) | all: method, labelled | CUSUM up/down thresholds, outcomes per false alarm | status (judged window, 30d) | wall s (writes, checks) |");
        Console.WriteLine("| --- | --- | --- | --- | --- | --- | --- | --- | --- | --- | --- | --- | --- | --- |");
        try
        {
            for (var hour = 0; hour < hours; hour++)
            {
                var n = (int)(((hour + 1) * total / hours) - written);
                var from = Start + TimeSpan.FromHours(hour);
                var changed = hour >= changeDay * 24;
                var batch = new PredictionRecord[n];
                var reports = new OutcomeReport[n];
                for (var i = 0; i < n; i++)
                {
                    var at = from + TimeSpan.FromTicks((long)(TimeSpan.TicksPerHour * ((i + 0.5) / n)));
                    var x = Normal(random);
                    var eta = -2.0 + (1.2 * x);
                    var p = 1.0 / (1.0 + Math.Exp(-eta));
                    var truth = changed ? 1.0 / (1.0 + Math.Exp(-(eta + Math.Log(2.0)))) : p;
                    batch[i] = new PredictionRecord(PredictionIds.Next(at), Model, Version, Stage.Live, at, null, eta, p,
                        string.Create(CultureInfo.InvariantCulture, $"{{\"load\":{x:F4}}}"));
                    reports[i] = new OutcomeReport(batch[i].Id, null, random.NextDouble() < truth ? (byte)1 : (byte)0);
                }

                clock.SetUtcNow(from + TimeSpan.FromHours(1));
                writing.Start();
                for (var i = 0; i < n; i += 5000)
                {
                    var take = Math.Min(5000, n - i);
                    await predictions.WritePredictionsAsync(new ArraySegment<PredictionRecord>(batch, i, take));
                    await outcomes.RecordOutcomesAsync(Model, new ArraySegment<OutcomeReport>(reports, i, take), ConflictPolicy.KeepFirst, clock.GetUtcNow());
                }

                writing.Stop();
                written += n;
                var dayEnd = (hour + 1) % 24 == 0;
                checking.Start();
                if (changed && firstFlagged is null)
                {
                    var status = await Status();
                    if (status.Status != "fine")
                    {
                        firstFlagged = hour + 1 - (changeDay * 24);
                        Console.WriteLine($"First status other than fine after the change: {status.Status}, {firstFlagged} simulated hour(s) after it{status.Reason}.");
                    }
                }

                if (dayEnd)
                {
                    await Checkpoint((hour + 1) / 24, written, maturedThrough: written - n);
                    writing.Reset();
                    checking.Reset();
                }

                checking.Stop();
            }
        }
        finally
        {
            await app.StopAsync();
            await app.DisposeAsync();
            Directory.Delete(dir, recursive: true);
        }

        async Task<(string Status, string Reason)> Status()
        {
            var report = JsonDocument.Parse(await http.GetStringAsync($"/v1/models/{Model}/monitor")).RootElement;
            return (report.GetProperty("status").GetString()!, Reasons(report));
        }

        async Task Checkpoint(int day, long labelled, long maturedThrough)
        {
            JsonElement all = default;
            var waited = 0;
            while (true)
            {
                all = JsonDocument.Parse(await http.GetStringAsync($"/v1/models/{Model}/monitor?window=all")).RootElement.Clone();
                var charted = all.TryGetProperty("cusum", out var cusum) && cusum.TryGetProperty("up", out var up) && up.TryGetProperty("steps", out var steps) ? steps.GetInt64() : 0;
                if (all.GetProperty("labelled").GetInt64() == labelled && charted >= maturedThrough)
                {
                    break;
                }

                if (++waited % 100 == 0)
                {
                    Console.Error.WriteLine($"day {day}: waiting: labelled {all.GetProperty("labelled")} of {labelled}, charts {charted} of {maturedThrough}");
                }

                if (waited > 20_000)
                {
                    throw new TimeoutException($"Day {day}: the server holds {all.GetProperty("labelled")} of {labelled} outcomes, its charts {charted} of {maturedThrough}.");
                }

                clock.Advance(Poll);
                await Task.Delay(10);
            }

            var times = new double[5];
            JsonElement report = default;
            for (var i = 0; i < times.Length; i++)
            {
                var stopwatch = Stopwatch.StartNew();
                report = JsonDocument.Parse(await http.GetStringAsync($"/v1/models/{Model}/monitor?window=30d")).RootElement.Clone();
                times[i] = stopwatch.Elapsed.TotalMilliseconds;
            }

            Array.Sort(times);
            // One refresh of every window's report (what the monitor loop does every ReportInterval), timed here.
            var refresh = Stopwatch.StartNew();
            await app.Services.GetRequiredService<Scorer.Monitor.Reporting.MonitorLoop>().RefreshAsync();
            var refreshMs = refresh.Elapsed.TotalMilliseconds;
            var judged = JsonDocument.Parse(await http.GetStringAsync($"/v1/models/{Model}/monitor")).RootElement.Clone();
            var metrics = await http.GetStringAsync("/metrics");
            var size = store == "sqlite" ? FileSize(db) + FileSize(db + "-wal") : await PostgresSize(store);
            Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
                $"| {day} | {labelled:N0} | {Resident() / 1048576.0:F0} | {VolumeMemory.Gauge(metrics, "scorer_memory_managed_heap_bytes") / 1048576:F0} | {VolumeMemory.Gauge(metrics, "scorer_memory_managed_committed_bytes") / 1048576:F0} | {VolumeMemory.Gauge(metrics, "scorer_memory_store_cache_bytes") / 1048576:F0} | {size / 1048576.0:F0} | {times[2]:F0} | {refreshMs:F0} | {report.GetProperty("method").GetString()} | {all.GetProperty("method").GetString()}, {all.GetProperty("labelled").GetInt64():N0} | {Charts(all)} | {judged.GetProperty("status").GetString()}{Reasons(judged)} | {run.Elapsed.TotalSeconds:F0} ({writing.Elapsed.TotalSeconds:F0}, {checking.Elapsed.TotalSeconds:F0}) |"));
        }
    }

    /// <summary>The CUSUM charts' thresholds and the run length they are set for: "h up / h down, ARL".</summary>
    private static string Charts(JsonElement report)
    {
        if (!report.TryGetProperty("cusum", out var cusum) || !cusum.TryGetProperty("up", out var up) || !cusum.TryGetProperty("down", out var down))
        {
            return "not started";
        }

        return string.Create(CultureInfo.InvariantCulture,
            $"{up.GetProperty("threshold").GetDouble():F2} / {down.GetProperty("threshold").GetDouble():F2}, {up.GetProperty("inControlRunLength").GetDouble():G3}");
    }

    /// <summary>The report's reasons after its status, ": a; b", or nothing when it gives none.</summary>
    private static string Reasons(JsonElement report) =>
        report.TryGetProperty("reasons", out var r) && r.ValueKind == JsonValueKind.Array && r.GetArrayLength() > 0
            ? ": " + string.Join("; ", r.EnumerateArray().Select(e => e.ToString()))
            : "";

    private static long FileSize(string path) => File.Exists(path) ? new FileInfo(path).Length : 0;

    private static async Task<long> PostgresSize(string connectionString)
    {
        await using var connection = new Npgsql.NpgsqlConnection(connectionString);
        await connection.OpenAsync();
        await using var command = new Npgsql.NpgsqlCommand("SELECT pg_database_size(current_database())", connection);
        return (long)(await command.ExecuteScalarAsync())!;
    }

    private static long Resident()
    {
        var line = File.ReadAllLines("/proc/self/status").First(l => l.StartsWith("VmRSS:", StringComparison.Ordinal));
        return long.Parse(line.Split(' ', StringSplitOptions.RemoveEmptyEntries)[1], CultureInfo.InvariantCulture) * 1024;
    }

    private static double Normal(Random random) => Math.Sqrt(-2.0 * Math.Log(1.0 - random.NextDouble())) * Math.Cos(2.0 * Math.PI * random.NextDouble());

    /// <summary>The soak's model, invented: the chance of a fault on a line within the hour from its load (standardised).</summary>
    private static string ModelFile() => """
        {
          "format": "scorer.model/1",
          "model": "soak-line-fault",
          "version": "1",
          "description": "Invented model for the soak benchmark: a fault on a line within the hour, from its standardised load.",
          "link": "logit",
          "outcome": { "name": "fault_within_1h", "positive": "fault reported within the hour", "horizon": "PT1H", "negatives": "explicit" },
          "features": [ { "name": "load", "type": "numeric", "min": -6, "max": 6 } ],
          "terms": [
            { "name": "(Intercept)", "coefficient": -2.0, "factors": [] },
            { "name": "load", "coefficient": 1.2, "factors": [{ "feature": "load" }] }
          ],
          "covariance": [[0.0004, 0.0001], [0.0001, 0.0004]],
          "threshold": 0.3,
          "baseline": {
            "n": 100000,
            "events": 16000,
            "linear_predictor": { "edges": [-3.0, -2.0, -1.0], "proportions": [0.2, 0.3, 0.3, 0.2] },
            "max_se": 0.05,
            "features": { "load": { "edges": [-0.84, 0, 0.84], "proportions": [0.2, 0.3, 0.3, 0.2] } }
          }
        }
        """;
}
