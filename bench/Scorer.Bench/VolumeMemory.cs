using System.Diagnostics;
using System.Globalization;
using System.Text.Json;
using Scorer.Store;
using Scorer.Store.Sqlite;

namespace Scorer.Bench;

/// <summary>
/// Memory at volume (docs/performance.md "Memory at volume"): a running server (Scorer.Server, SQLite, the pump demo
/// model, Scorer:Monitor:ExactRows as given) while this process writes labelled predictions into the same store file:
/// a perfectly calibrated stream (outcomes drawn from each prediction's own p, seeded), prediction times spread over
/// the last 20 days, outcomes by id in batches. At each checkpoint it waits until the server's "all" report holds every
/// outcome, then prints the server's resident memory, its report latency for the 30d window (median of 5), the report's
/// method and status. 127.0.0.1 only; the server is stopped by PID at the end.
/// </summary>
public static class VolumeMemory
{
    private const string Model = "pump-bearing-failure";
    private const string Version = "2026.11.1";

    public static async Task RunAsync(string serverDll, string modelFile, int millions, int exactRows)
    {
        var dir = Directory.CreateTempSubdirectory("scorer-volume-").FullName;
        Directory.CreateDirectory(Path.Combine(dir, "models"));
        File.Copy(modelFile, Path.Combine(dir, "models", "model.json"));
        var db = Path.Combine(dir, "scorer.db");
        var start = new ProcessStartInfo("dotnet", [serverDll, "--models", Path.Combine(dir, "models"), "--store", db, "--http", "127.0.0.1:18090", "--grpc", "127.0.0.1:18091"])
        {
            RedirectStandardOutput = true,
            RedirectStandardError = true,
        };
        start.Environment["Scorer__Monitor__ExactRows"] = exactRows.ToString(CultureInfo.InvariantCulture);
        start.Environment["Scorer__LogLevel"] = "Warning";
        using var server = Process.Start(start)!;
        server.OutputDataReceived += (_, _) => { };
        server.ErrorDataReceived += (_, _) => { };
        server.BeginOutputReadLine();
        server.BeginErrorReadLine();
        using var http = new HttpClient { BaseAddress = new Uri("http://127.0.0.1:18090"), Timeout = TimeSpan.FromSeconds(60) };
        try
        {
            await Until(async () => (await http.GetAsync("/readyz")).IsSuccessStatusCode, TimeSpan.FromSeconds(60));
            await using var store = SqliteScorerStore.ForFile(db);
            var random = new Random(20261203);
            var now = TimeProvider.System.GetUtcNow(); // the server runs on the system clock too
            long written = 0;
            Console.WriteLine("| labelled predictions | resident MB | managed heap MB | GC committed MB | SQLite MB | 30d report ms (median of 5) | method (30d) | status |");
            Console.WriteLine("| --- | --- | --- | --- | --- | --- | --- | --- |");
            await Checkpoint(0);
            for (var million = 1; million <= millions; million++)
            {
                for (var batch = 0; batch < 200; batch++)
                {
                    var predictions = new PredictionRecord[5000];
                    var outcomes = new OutcomeReport[5000];
                    for (var i = 0; i < predictions.Length; i++)
                    {
                        var at = now - TimeSpan.FromDays(20) + TimeSpan.FromDays(20) * ((written + i) / (millions * 1e6));
                        var eta = -2.0 + 1.2 * Normal(random);
                        var p = 1.0 / (1.0 + Math.Exp(-eta));
                        predictions[i] = new PredictionRecord(PredictionIds.Next(at), Model, Version, Stage.Live, at, null, eta, p, "{}");
                        outcomes[i] = new OutcomeReport(predictions[i].Id, null, random.NextDouble() < p ? (byte)1 : (byte)0);
                    }

                    await store.WritePredictionsAsync(predictions);
                    await store.RecordOutcomesAsync(Model, outcomes, ConflictPolicy.KeepFirst, now);
                    written += predictions.Length;
                }

                await Checkpoint(written);
            }
        }
        finally
        {
            server.Kill(entireProcessTree: true);
            await server.WaitForExitAsync();
            Directory.Delete(dir, recursive: true);
        }

        async Task Checkpoint(long labelled)
        {
            JsonElement report = default;
            await Until(async () =>
            {
                report = JsonDocument.Parse(await http.GetStringAsync($"/v1/models/{Model}/monitor?window=all")).RootElement.Clone();
                return report.GetProperty("labelled").GetInt64() == labelled;
            }, TimeSpan.FromMinutes(5));
            var times = new double[5];
            for (var i = 0; i < times.Length; i++)
            {
                var clock = Stopwatch.StartNew();
                report = JsonDocument.Parse(await http.GetStringAsync($"/v1/models/{Model}/monitor?window=30d")).RootElement.Clone();
                times[i] = clock.Elapsed.TotalMilliseconds;
            }

            Array.Sort(times);
            var rss = File.ReadAllLines($"/proc/{server.Id}/status").First(l => l.StartsWith("VmRSS:", StringComparison.Ordinal));
            var kb = long.Parse(rss.Split(' ', StringSplitOptions.RemoveEmptyEntries)[1], CultureInfo.InvariantCulture);
            var metrics = await http.GetStringAsync("/metrics");
            Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
                $"| {labelled:N0} | {kb / 1024.0:F0} | {Gauge(metrics, "scorer_memory_managed_heap_bytes") / 1048576:F0} | {Gauge(metrics, "scorer_memory_managed_committed_bytes") / 1048576:F0} | {Gauge(metrics, "scorer_memory_store_cache_bytes") / 1048576:F0} | {times[2]:F0} | {(report.TryGetProperty("method", out var m) ? m.GetString() : "")} | {report.GetProperty("status").GetString()} |"));
        }
    }

    /// <summary>The value of an unlabelled gauge in a Prometheus text scrape.</summary>
    internal static double Gauge(string scrape, string name) =>
        double.Parse(scrape.Split('\n').First(l => l.StartsWith(name + " ", StringComparison.Ordinal))[(name.Length + 1)..], CultureInfo.InvariantCulture);

    private static double Normal(Random random) => Math.Sqrt(-2.0 * Math.Log(1.0 - random.NextDouble())) * Math.Cos(2.0 * Math.PI * random.NextDouble());

    private static async Task Until(Func<Task<bool>> condition, TimeSpan limit)
    {
        var clock = Stopwatch.StartNew();
        while (clock.Elapsed < limit)
        {
            try
            {
                if (await condition())
                {
                    return;
                }
            }
            catch (HttpRequestException)
            {
            }

            await Task.Delay(500);
        }

        throw new TimeoutException($"Not reached within {limit}.");
    }
}
