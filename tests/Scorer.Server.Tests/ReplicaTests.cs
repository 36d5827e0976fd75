using System.Diagnostics;
using System.Globalization;
using System.Net;
using System.Net.Sockets;
using System.Text;
using System.Text.Json;
using System.Text.Json.Nodes;
using Scorer.Store.Postgres;
using Xunit.Abstractions;

namespace Scorer.Server.Tests;

/// <summary>A test that needs a real PostgreSQL server: skipped with the reason when none is named, except under CI, where it runs and fails.</summary>
public sealed class PostgresFactAttribute : FactAttribute
{
    public const string Variable = "SCORER_TEST_POSTGRES";

    public PostgresFactAttribute()
    {
        var ci = string.Equals(Environment.GetEnvironmentVariable("CI"), "true", StringComparison.OrdinalIgnoreCase);
        if (string.IsNullOrWhiteSpace(Environment.GetEnvironmentVariable(Variable)) && !ci)
        {
            Skip = $"No PostgreSQL server: set {Variable} to an Npgsql connection string (scripts/postgres.sh start DIR prints one).";
        }
    }

    public static string ConnectionString => Environment.GetEnvironmentVariable(Variable) is { Length: > 0 } s
        ? s
        : throw new InvalidOperationException($"CI=true but {Variable} is not set: CI must run the replica tests against a real PostgreSQL server.");
}

/// <summary>
/// Three server processes (the built Scorer.Server, started as separate processes on loopback) sharing one real
/// PostgreSQL database: rows scored on the first, outcomes sent to the second, the monitor read from the third, and all
/// three agree with each other and with a single in-process server over SQLite fed the same rows and outcomes; the
/// charts' holder is killed and another takes the charts over without losing or double-counting an outcome; a
/// promotion made on one replica is served by the others through the store's notification (their folder rescan is
/// set to 10 minutes, so polling cannot be what switched them).
/// </summary>
public sealed class ReplicaTests(ITestOutputHelper output) : IDisposable
{
    private const string Model = "pump-bearing-failure";
    private const string V1 = "2026.11.1";
    private const string V2 = "2026.12.1";
    private const int Rows = 900;
    private const int FirstOutcomes = 600;
    private readonly TestFolder _folder = new();
    private readonly string _schema = "replicas_" + Guid.NewGuid().ToString("N")[..12];

    public void Dispose() => _folder.Dispose();

    [PostgresFact]
    public async Task Three_replicas_on_one_postgres_agree_hand_the_charts_over_and_follow_a_promotion()
    {
        WriteModels(_folder.Models);
        var (rows, outcomes) = InventedTraffic();
        var connection = PostgresFactAttribute.ConnectionString;
        var replicas = new List<ServerProcess>();
        try
        {
            // Started together: the migrations take turns under the store's advisory lock.
            for (var i = 0; i < 3; i++)
            {
                replicas.Add(ServerProcess.Start(_folder.Models, connection, _schema, output, i));
            }

            await Task.WhenAll(replicas.Select(r => r.WaitReadyAsync()));
            var (a, b, c) = (replicas[0], replicas[1], replicas[2]);

            // Scored on the first, outcomes (by key) for the first 600 to the second, the report read from the third.
            await ScoreAsync(a.Http, rows);
            await using (var store = PostgresScorerStore.ForConnectionString(connection, new PostgresStoreOptions { Schema = _schema }))
            {
                Assert.True(await Files.EventuallyAsync(async () => await store.CountPredictionsAsync(Model, V1) == Rows, TimeSpan.FromSeconds(30)));
            }

            await PostOutcomesAsync(b.Http, outcomes.Take(FirstOutcomes));
            foreach (var replica in replicas)
            {
                // Each replica shows the charts from the state the holder saved, at its own next report: wait for all.
                await WaitForChartsAsync(replica.Http, FirstOutcomes);
            }

            var reports = await Task.WhenAll(replicas.Select(r => ReportAsync(r.Http)));
            AssertSameReport(reports[0], reports[1], "replica 1 and replica 2");
            AssertSameReport(reports[0], reports[2], "replica 1 and replica 3");

            // Exactly one replica runs the charts. Kill it; the rest of the outcomes go to a survivor.
            var holders = await Task.WhenAll(replicas.Select(r => HolderAsync(r.Http)));
            Assert.Equal(1, holders.Count(h => h));
            var holder = replicas[Array.IndexOf(holders, true)];
            holder.Kill();
            var survivors = replicas.Where(r => r != holder).ToList();
            await PostOutcomesAsync(survivors[0].Http, outcomes.Skip(FirstOutcomes));
            Assert.True(await Files.EventuallyAsync(async () => (await Task.WhenAll(survivors.Select(r => HolderAsync(r.Http)))).Count(h => h) == 1,
                TimeSpan.FromSeconds(30)), "no survivor took the charts over");
            foreach (var survivor in survivors)
            {
                await WaitForChartsAsync(survivor.Http, Rows);
            }

            var after = await Task.WhenAll(survivors.Select(r => ReportAsync(r.Http)));
            AssertSameReport(after[0], after[1], "the two survivors");
            foreach (var chart in new[] { "up", "down" })
            {
                // Every outcome once: as many steps as labelled predictions, and signal positions strictly increasing.
                var view = after[0].GetProperty("cusum").GetProperty(chart);
                Assert.Equal(Rows, view.GetProperty("steps").GetInt64());
                var indexes = view.GetProperty("signals").EnumerateArray().Select(s => s.GetProperty("index").GetInt64()).ToList();
                Assert.Equal(indexes.Distinct().Order(), indexes);
            }

            // The same rows and outcomes through one in-process server over SQLite give the same statistics.
            using var single = new TestFolder();
            WriteModels(single.Models);
            await using (var one = await RunningServer.StartAsync(single, new Dictionary<string, string?>
            {
                ["Scorer:Monitor:PollInterval"] = "00:00:00.100",
                ["Scorer:Monitor:ReportInterval"] = "00:00:00.250",
            }))
            {
                await ScoreAsync(one.Http, rows);
                Assert.True(await Files.EventuallyAsync(async () => await one.Service<Scorer.Store.IScorerStore>().CountPredictionsAsync(Model, V1) == Rows,
                    TimeSpan.FromSeconds(30)));
                await PostOutcomesAsync(one.Http, outcomes);
                await WaitForChartsAsync(one.Http, Rows);
                AssertSameStatistics(await ReportAsync(one.Http), after[0]);
            }

            // A promotion on one survivor is served by the other through the notification, not the (10-minute) rescan.
            var timer = Stopwatch.StartNew();
            using (var promote = await survivors[0].Http.PostAsync($"/v1/models/{Model}/versions/{V2}/stage",
                new StringContent("{\"stage\":\"live\"}", Encoding.UTF8, "application/json")))
            {
                Assert.Equal(HttpStatusCode.OK, promote.StatusCode);
            }

            Assert.True(await Files.EventuallyAsync(async () => await LiveAsync(survivors[1].Http) == V2, TimeSpan.FromSeconds(10)),
                "the other replica did not switch to the promoted version");
            output.WriteLine($"the other replica served {V2} as live {timer.ElapsedMilliseconds} ms after the promotion was answered");
            var scored = await ScoreAsync(survivors[1].Http, rows.Take(1).ToList());
            Assert.Equal(V2, scored);
        }
        finally
        {
            foreach (var replica in replicas)
            {
                replica.Dispose();
            }

            await using var db = new Npgsql.NpgsqlConnection(connection);
            await db.OpenAsync();
            await using var drop = new Npgsql.NpgsqlCommand($"DROP SCHEMA IF EXISTS {_schema} CASCADE", db);
            await drop.ExecuteNonQueryAsync();
        }
    }

    /// <summary>The pump demo model with a 1-second horizon and explicit negatives, and a second version that loads as shadow.</summary>
    private static void WriteModels(string folder)
    {
        var model = JsonNode.Parse(File.ReadAllText(Files.Example("pump-bearings")))!;
        model["outcome"]!["horizon"] = "PT1S";
        model["outcome"]!["negatives"] = "explicit";
        File.WriteAllText(Path.Combine(folder, "pump.json"), model.ToJsonString());
        model["version"] = V2;
        File.WriteAllText(Path.Combine(folder, "pump-v2.json"), model.ToJsonString());
    }

    /// <summary>Invented pump snapshots (seeded) and outcomes drawn with odds twice the model's for the later half.</summary>
    private static (List<string> Rows, List<(string Key, int Outcome)> Outcomes) InventedTraffic()
    {
        var random = new Random(20261202);
        string[] sites = ["north", "east", "river"];
        var rows = new List<string>();
        var outcomes = new List<(string, int)>();
        for (var i = 0; i < Rows; i++)
        {
            var vibration = 1 + (5 * random.NextDouble());
            var temperature = 40 + (35 * random.NextDouble());
            var hours = random.Next(50, 7500);
            rows.Add(string.Create(CultureInfo.InvariantCulture,
                $"{{\"vibration_rms\":{vibration:F2},\"bearing_temp_c\":{temperature:F1},\"hours_since_service\":{hours},\"site\":\"{sites[random.Next(3)]}\"}}"));
            outcomes.Add(($"PB-{i}", random.NextDouble() < (i < Rows / 2 ? 0.2 : 0.4) ? 1 : 0));
        }

        return (rows, outcomes);
    }

    /// <summary>Scores the rows in requests of 100 with keys PB-0, PB-1, …; returns the version that answered.</summary>
    private static async Task<string> ScoreAsync(HttpClient http, IReadOnlyList<string> rows)
    {
        var version = "";
        for (var from = 0; from < rows.Count; from += 100)
        {
            var part = rows.Skip(from).Take(100).ToList();
            var body = "{\"rows\":[" + string.Join(",", part) + "],\"keys\":[" + string.Join(",", part.Select((_, i) => $"\"PB-{from + i}\"")) + "]}";
            using var response = await http.PostAsync($"/v1/models/{Model}/score", new StringContent(body, Encoding.UTF8, "application/json"));
            var text = await response.Content.ReadAsStringAsync();
            Assert.True(response.StatusCode == HttpStatusCode.OK, text);
            version = JsonDocument.Parse(text).RootElement.GetProperty("version").GetString()!;
        }

        return version;
    }

    private static async Task PostOutcomesAsync(HttpClient http, IEnumerable<(string Key, int Outcome)> outcomes)
    {
        var body = "{\"outcomes\":[" + string.Join(",", outcomes.Select(o => $"{{\"key\":\"{o.Key}\",\"outcome\":{o.Outcome}}}")) + "]}";
        using var response = await http.PostAsync($"/v1/models/{Model}/outcomes", new StringContent(body, Encoding.UTF8, "application/json"));
        Assert.True(response.StatusCode == HttpStatusCode.OK, await response.Content.ReadAsStringAsync());
    }

    private static async Task<JsonElement> ReportAsync(HttpClient http) =>
        JsonDocument.Parse(await http.GetStringAsync($"/v1/models/{Model}/monitor?version={V1}&window=all")).RootElement.Clone();

    private static async Task WaitForChartsAsync(HttpClient http, int steps)
    {
        JsonElement report = default;
        Assert.True(await Files.EventuallyAsync(async () =>
        {
            report = await ReportAsync(http);
            return report.GetProperty("labelled").GetInt64() == steps && report.TryGetProperty("cusum", out var c) && c.TryGetProperty("up", out var up)
                && up.GetProperty("steps").GetInt64() == steps;
        }, TimeSpan.FromSeconds(60)), report.ToString());
    }

    private static async Task<bool> HolderAsync(HttpClient http)
    {
        var metrics = await http.GetStringAsync("/metrics");
        var line = metrics.Split('\n').Single(l => l.StartsWith("scorer_monitor_charts_holder ", StringComparison.Ordinal));
        return line.EndsWith(" 1", StringComparison.Ordinal);
    }

    private static async Task<string?> LiveAsync(HttpClient http)
    {
        using var json = JsonDocument.Parse(await http.GetStringAsync("/v1/models"));
        var entry = json.RootElement.GetProperty("models").EnumerateArray().First(m => m.GetProperty("model").GetString() == Model);
        return entry.GetProperty("versions").EnumerateArray().Where(v => v.GetProperty("stage").GetString() == "live")
            .Select(v => v.GetProperty("version").GetString()).SingleOrDefault();
    }

    /// <summary>Replicas reading one store give the same report, the charts included (the same state, saved by the holder).</summary>
    private static void AssertSameReport(JsonElement x, JsonElement y, string which)
    {
        AssertSameStatistics(x, y);
        foreach (var chart in new[] { "up", "down" })
        {
            var cx = x.GetProperty("cusum").GetProperty(chart);
            var cy = y.GetProperty("cusum").GetProperty(chart);
            Assert.True(cx.GetProperty("value").GetDouble() == cy.GetProperty("value").GetDouble(), $"{which}: cusum.{chart}.value");
            Assert.True(cx.GetProperty("threshold").GetDouble() == cy.GetProperty("threshold").GetDouble(), $"{which}: cusum.{chart}.threshold");
            Assert.Equal(cx.GetProperty("signals").GetRawText(), cy.GetProperty("signals").GetRawText());
        }
    }

    /// <summary>The window statistics, which depend only on the rows and outcomes (not on prediction ids or times).</summary>
    private static void AssertSameStatistics(JsonElement x, JsonElement y)
    {
        Assert.Equal(x.GetProperty("labelled").GetInt64(), y.GetProperty("labelled").GetInt64());
        Assert.Equal(x.GetProperty("events").GetInt64(), y.GetProperty("events").GetInt64());
        Assert.Equal(x.GetProperty("auc").GetProperty("estimate").GetDouble(), y.GetProperty("auc").GetProperty("estimate").GetDouble());
        foreach (var name in new[] { "brier", "logLoss", "ece" })
        {
            Assert.Equal(x.GetProperty(name).GetDouble(), y.GetProperty(name).GetDouble(), 1e-12);
        }

        foreach (var name in new[] { "calibrationIntercept", "calibrationSlope" })
        {
            Assert.Equal(x.GetProperty(name).GetProperty("estimate").GetDouble(), y.GetProperty(name).GetProperty("estimate").GetDouble(), 1e-9);
            Assert.Equal(x.GetProperty(name).GetProperty("se").GetDouble(), y.GetProperty(name).GetProperty("se").GetDouble(), 1e-9);
        }

        Assert.Equal(x.GetProperty("hosmerLemeshow").GetProperty("statistic").GetDouble(), y.GetProperty("hosmerLemeshow").GetProperty("statistic").GetDouble(), 1e-9);
        Assert.Equal(x.GetProperty("psi").GetProperty("linearPredictor").GetDouble(), y.GetProperty("psi").GetProperty("linearPredictor").GetDouble(), 1e-12);
    }

    /// <summary>The built server, run as a process of its own, with its output kept for the test log.</summary>
    private sealed class ServerProcess : IDisposable
    {
        private readonly Process _process;
        private readonly StringBuilder _log = new();
        private readonly ITestOutputHelper _output;
        private readonly int _number;

        private ServerProcess(Process process, HttpClient http, ITestOutputHelper output, int number)
        {
            _process = process;
            Http = http;
            _output = output;
            _number = number;
        }

        public HttpClient Http { get; }

        public static ServerProcess Start(string models, string connection, string schema, ITestOutputHelper output, int number)
        {
            var server = Path.Combine(Scorer.Testing.TestRepository.Root, "src", "Scorer.Server", "bin", "Release", "net10.0", "Scorer.Server.dll");
            Assert.True(File.Exists(server), $"{server} is missing: build the solution in Release first");
            var (http, grpc) = (FreePort(), FreePort());
            var start = new ProcessStartInfo("dotnet") { RedirectStandardOutput = true, RedirectStandardError = true, UseShellExecute = false };
            foreach (var arg in new[] { server, "--models", models, "--store-kind", "postgres", "--store-connection", connection, "--http", $"127.0.0.1:{http}",
                "--grpc", $"127.0.0.1:{grpc}" })
            {
                start.ArgumentList.Add(arg);
            }

            start.Environment["Scorer__Store__Schema"] = schema;
            start.Environment["Scorer__SeedDemoModels"] = "false";
            start.Environment["Scorer__RescanInterval"] = "00:10:00";
            start.Environment["Scorer__Monitor__PollInterval"] = "00:00:00.100";
            start.Environment["Scorer__Monitor__ReportInterval"] = "00:00:00.250";
            start.Environment["Scorer__PredictionLog__MaxDelay"] = "00:00:00.005";
            start.Environment["Scorer__LogFormat"] = "text";
            start.Environment["Scorer__LogLevel"] = "Information";
            var process = Process.Start(start)!;
            var replica = new ServerProcess(process, new HttpClient { BaseAddress = new Uri($"http://127.0.0.1:{http}") }, output, number);
            process.OutputDataReceived += (_, e) => replica.Append(e.Data);
            process.ErrorDataReceived += (_, e) => replica.Append(e.Data);
            process.BeginOutputReadLine();
            process.BeginErrorReadLine();
            return replica;
        }

        private void Append(string? line)
        {
            if (line is not null)
            {
                lock (_log)
                {
                    _log.AppendLine(line);
                }
            }
        }

        public async Task WaitReadyAsync()
        {
            var ready = await Files.EventuallyAsync(async () =>
            {
                try
                {
                    using var response = await Http.GetAsync("/readyz");
                    return response.StatusCode == HttpStatusCode.OK;
                }
                catch (HttpRequestException)
                {
                    return false;
                }
            }, TimeSpan.FromSeconds(60));
            Assert.True(ready, $"replica {_number + 1} did not become ready:\n{Log()}");
        }

        public void Kill()
        {
            _process.Kill(entireProcessTree: true);
            _process.WaitForExit();
        }

        private string Log()
        {
            lock (_log)
            {
                return _log.ToString();
            }
        }

        public void Dispose()
        {
            if (!_process.HasExited)
            {
                _process.Kill(entireProcessTree: true);
                _process.WaitForExit();
            }

            _output.WriteLine($"--- replica {_number + 1} ---\n{Log()}");
            _process.Dispose();
            Http.Dispose();
        }

        private static int FreePort()
        {
            using var listener = new TcpListener(IPAddress.Loopback, 0);
            listener.Start();
            return ((IPEndPoint)listener.LocalEndpoint).Port;
        }
    }
}
