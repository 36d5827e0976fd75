using System.Globalization;
using System.Net;
using System.Text;
using System.Text.Json;
using System.Text.Json.Nodes;
using Scorer.Store;

namespace Scorer.Server.Tests;

/// <summary>
/// The sequential charts and the label-free drift through the running service: the CUSUM on MASS's Pima.te outcomes
/// once they mature (a copy of the R-written model with a 2-second horizon), and the PSI of scored rows against a
/// model file's baseline.
/// </summary>
public sealed class MonitorChartsTests : IDisposable
{
    private readonly TestFolder _folder = new();

    public void Dispose() => _folder.Dispose();

    private static async Task<JsonElement> GetJsonAsync(RunningServer server, string path)
    {
        var text = await server.Http.GetStringAsync(path);
        return JsonDocument.Parse(text).RootElement.Clone();
    }

    private static async Task PostAsync(RunningServer server, string path, string body)
    {
        using var content = new StringContent(body, Encoding.UTF8, "application/json");
        using var response = await server.Http.PostAsync(path, content);
        Assert.Equal(HttpStatusCode.OK, response.StatusCode);
    }

    private async Task<RunningServer> StartPimaAsync(string falseAlarmDays = "0", string signalsKept = "1000", string pageRows = "50000")
    {
        // The model R fit on Pima.tr, with its outcome horizon cut to 2 s so that outcomes mature within the test.
        var model = JsonNode.Parse(File.ReadAllText(Files.Reference("pima-logit.model.json")))!;
        model["outcome"]!["horizon"] = "PT2S";
        File.WriteAllText(Path.Combine(_folder.Models, "pima.json"), model.ToJsonString());
        return await RunningServer.StartAsync(_folder, new Dictionary<string, string?>
        {
            ["Scorer:Monitor:PollInterval"] = "00:00:00.050",
            ["Scorer:Monitor:ReportInterval"] = "00:00:00.200",
            // 0: the thresholds from CusumRunLength alone, so the run length these tests check is the configured one.
            ["Scorer:Monitor:CusumFalseAlarmDays"] = falseAlarmDays,
            ["Scorer:Monitor:CusumSignalsKept"] = signalsKept,
            ["Scorer:Monitor:ChartPageRows"] = pageRows,
        });
    }

    private static async Task ScoreAndLabelAsync(RunningServer server, bool flipped, int rounds = 1)
    {
        var lines = File.ReadAllLines(Files.Reference("pima.rows.csv"));
        var header = lines[0].Split(',').Select(h => h.Trim('"')).ToArray();
        var rows = lines.Skip(1).Select(l => "{" + string.Join(",", l.Split(',').Select((v, i) => $"\"{header[i]}\":{v}")) + "}").ToList();
        for (var round = 0; round < rounds; round++)
        {
            // The same keys each round: one outcome report by key labels every prediction carrying it.
            await PostAsync(server, "/v1/models/pima/score",
                "{\"rows\":[" + string.Join(",", rows) + "],\"keys\":[" + string.Join(",", Enumerable.Range(0, rows.Count).Select(i => $"\"te-{i}\"")) + "]}");
        }

        var store = server.Service<IScorerStore>();
        Assert.True(await Files.EventuallyAsync(async () => await store.CountPredictionsAsync("pima") == rows.Count * rounds, TimeSpan.FromSeconds(10)));
        var y = File.ReadAllLines(Files.Reference("pima.outcomes.csv")).Skip(1).Select(int.Parse).ToList();
        await PostAsync(server, "/v1/models/pima/outcomes",
            "{\"outcomes\":[" + string.Join(",", y.Select((v, i) => $"{{\"key\":\"te-{i}\",\"outcome\":{(flipped ? 1 - v : v)}}}")) + "]}");
    }

    /// <summary>The report over all outcomes once the charts have taken in <paramref name="steps"/> outcomes.</summary>
    private static async Task<JsonElement> ReportWhenChartsTookAsync(RunningServer server, long steps)
    {
        JsonElement report = default;
        Assert.True(await Files.EventuallyAsync(async () =>
        {
            report = await GetJsonAsync(server, "/v1/models/pima/monitor?window=all");
            return report.TryGetProperty("cusum", out var c) && c.TryGetProperty("up", out var up) && up.GetProperty("steps").GetInt64() == steps;
        }, TimeSpan.FromSeconds(30)), $"the charts did not take in {steps} outcomes: {report}");
        return report;
    }

    [Fact]
    public async Task Matured_outcomes_enter_both_cusum_charts_with_thresholds_set_for_the_configured_run_length()
    {
        await using var server = await StartPimaAsync();
        await ScoreAndLabelAsync(server, flipped: false);

        var report = await ReportWhenChartsTookAsync(server, 332);

        foreach (var chart in new[] { "up", "down" })
        {
            var c = report.GetProperty("cusum").GetProperty(chart);
            Assert.Equal(332, c.GetProperty("steps").GetInt64());
            Assert.True(c.GetProperty("threshold").GetDouble() > 2, chart);

            // The Markov-chain run length at the chosen threshold is the configured 100,000. ARL(h) is a step function
            // (Webster & Pettitt 2007, via the reference README), with steps the wider the fewer distinct p there are:
            // with these 332 p values the bisection lands within about 1% (99,195 seen).
            Assert.Equal(100_000, c.GetProperty("inControlRunLength").GetDouble(), 100_000 * 2e-2);
            Assert.InRange(c.GetProperty("detectionDelay").GetDouble(), 1, 100_000);
        }

        Assert.Equal(2.0, report.GetProperty("cusum").GetProperty("up").GetProperty("oddsRatio").GetDouble());
        Assert.Equal(0.5, report.GetProperty("cusum").GetProperty("down").GetProperty("oddsRatio").GetDouble());
        Assert.True(report.TryGetProperty("ewma", out _));
    }

    [Fact]
    public async Task With_a_false_alarm_budget_in_days_the_thresholds_follow_the_outcome_rate_and_never_fall_below_the_floor()
    {
        // Three rounds of MASS's Pima.te (996 outcomes), all predicted within seconds: the rate is measured over at least
        // a day (FalseAlarmBudget.MinRateSpan), so the recent outcomes count as that many per day. The charts look at the
        // rate every CusumMinSample (200) outcomes and set the thresholds again when the budget's run length moved by a
        // quarter: at outcome 400 (146,000), 600 (219,000) and 800 (800 a day × 365 days = 292,000); at 1,000 they
        // would look again, but there are 996.
        await using var server = await StartPimaAsync(falseAlarmDays: "365");
        await ScoreAndLabelAsync(server, flipped: false, rounds: 3);
        var report = await ReportWhenChartsTookAsync(server, 996);
        foreach (var chart in new[] { "up", "down" })
        {
            // The bisection lands within about 1% of its target (see the test above).
            Assert.Equal(292_000, report.GetProperty("cusum").GetProperty(chart).GetProperty("inControlRunLength").GetDouble(), 292_000 * 2e-2);
        }
    }

    [Fact]
    public async Task A_busy_stream_is_charted_at_its_own_outcome_rate_over_days_not_at_the_rate_of_its_last_few_thousand_outcomes()
    {
        // 60,000 labelled predictions spread evenly over the three days before now: 20,000 a day, so one false alarm per
        // 365 days is 7.3 million outcomes per false alarm. The last CusumSample (2,000) outcomes span 7.2 hours; a rate
        // taken from them alone counts over the shortest span of a day (2,000 a day, 730,000 outcomes per false alarm),
        // which made a busy, well-calibrated stream alarm every few days. The probabilities are R's predict() of the
        // Pima.tr fit on MASS's Pima.te rows, the outcomes Pima.te's own, repeated. During the first day the rate counts
        // over a day and grows with the count; the thresholds are set again when the run length moved by more than a
        // quarter, so the last setting is within a quarter below 7.3 million (the bisection within about 1% of it).
        await using var server = await StartPimaAsync(falseAlarmDays: "365");
        var p = File.ReadAllLines(Files.Reference("pima-logit.expected.csv")).Skip(1)
            .Select(l => double.Parse(l.Split(',')[2], CultureInfo.InvariantCulture)).ToArray();
        var y = File.ReadAllLines(Files.Reference("pima.outcomes.csv")).Skip(1).Select(byte.Parse).ToArray();
        Assert.Equal(332, p.Length);

        const int n = 60_000;
        var end = DateTimeOffset.UtcNow.AddHours(-1);
        var start = end.AddDays(-3);
        var predictions = server.Service<IPredictionLogStore>();
        var outcomes = server.Service<IOutcomeStore>();
        for (var from = 0; from < n; from += 5_000)
        {
            var batch = Enumerable.Range(from, 5_000).Select(i =>
            {
                var at = start + ((end - start) * ((i + 0.5) / n));
                var pi = p[i % p.Length];
                return new PredictionRecord(PredictionIds.Next(at), "pima", "r-logit", Stage.Live, at, null, Math.Log(pi / (1 - pi)), pi, "{}");
            }).ToArray();
            await predictions.WritePredictionsAsync(batch);
            await outcomes.RecordOutcomesAsync("pima", [.. batch.Select((r, j) => new OutcomeReport(r.Id, null, y[(from + j) % y.Length]))],
                ConflictPolicy.KeepFirst, DateTimeOffset.UtcNow);
        }

        var report = await ReportWhenChartsTookAsync(server, n);
        foreach (var chart in new[] { "up", "down" })
        {
            var runLength = report.GetProperty("cusum").GetProperty(chart).GetProperty("inControlRunLength").GetDouble();
            Assert.InRange(runLength, 7.3e6 / 1.25 * 0.98, 7.3e6 * 1.02);
        }
    }

    [Fact]
    public async Task A_budget_in_days_below_the_floor_at_the_observed_rate_keeps_the_floor()
    {
        // 332 outcomes a day for 30 days is 9,960 outcomes per false alarm: below CusumRunLength, which stays.
        await using var server = await StartPimaAsync(falseAlarmDays: "30");
        await ScoreAndLabelAsync(server, flipped: false);
        var report = await ReportWhenChartsTookAsync(server, 332);
        Assert.Equal(100_000, report.GetProperty("cusum").GetProperty("up").GetProperty("inControlRunLength").GetDouble(), 100_000 * 2e-2);
    }

    [Fact]
    public async Task Outcomes_far_more_frequent_than_predicted_make_the_upward_cusum_signal_with_its_index_time_and_statistic()
    {
        await using var server = await StartPimaAsync();
        await ScoreAndLabelAsync(server, flipped: true);

        JsonElement up = default;
        Assert.True(await Files.EventuallyAsync(async () =>
        {
            var report = await GetJsonAsync(server, "/v1/models/pima/monitor?window=all");
            return report.TryGetProperty("cusum", out var c) && c.TryGetProperty("up", out up) && up.GetProperty("steps").GetInt64() == 332;
        }, TimeSpan.FromSeconds(30)));

        var signals = up.GetProperty("signals").EnumerateArray().ToList();
        Assert.NotEmpty(signals);
        var threshold = up.GetProperty("threshold").GetDouble();
        foreach (var s in signals)
        {
            Assert.InRange(s.GetProperty("index").GetInt64(), 1, 332);
            Assert.True(s.GetProperty("statistic").GetDouble() >= threshold);
            Assert.True(DateTimeOffset.Parse(s.GetProperty("time").GetString()!, CultureInfo.InvariantCulture) > DateTimeOffset.UtcNow.AddMinutes(-5));
        }
    }

    [Fact]
    public async Task Charts_that_catch_up_page_by_page_take_in_every_outcome_once_and_stand_where_one_pass_over_the_rows_does()
    {
        // Pages of 7 rows (Scorer:Monitor:ChartPageRows) over MASS's Pima.te: 332 outcomes in 48 pages. The charts must
        // stand where the Steiner et al. (2000) recursion over the same rows in prediction-time order stands, computed
        // here from the store's rows with the chart's own threshold (fixed: CusumFalseAlarmDays 0).
        await using var server = await StartPimaAsync(pageRows: "7");
        await ScoreAndLabelAsync(server, flipped: false);
        var report = await ReportWhenChartsTookAsync(server, 332);
        var rows = await server.Service<IScorerStore>().GetLabelledAsync("pima", "r-logit", DateTimeOffset.UnixEpoch, DateTimeOffset.UtcNow.AddDays(1));
        Assert.Equal(332, rows.Count);
        foreach (var (chart, oddsRatio) in new[] { ("up", 2.0), ("down", 0.5) })
        {
            var c = report.GetProperty("cusum").GetProperty(chart);
            var h = c.GetProperty("threshold").GetDouble();
            double s = 0;
            var signals = 0;
            foreach (var row in rows)
            {
                s = Math.Max(0, s + Scorer.Statistics.Sequential.RiskAdjustedCusum.Weight(row.Probability, row.Outcome, oddsRatio));
                if (s >= h)
                {
                    s = 0;
                    signals++;
                }
            }

            Assert.Equal(s, c.GetProperty("value").GetDouble(), 1e-9);
            Assert.Equal(signals, c.GetProperty("signalCount").GetInt64());
        }
    }

    [Fact]
    public async Task A_chart_that_keeps_signalling_keeps_only_its_latest_signals_and_counts_them_all()
    {
        // Pima.te's outcomes flipped, three rounds: the upward chart signals again and again. With CusumSignalsKept 2 the
        // report holds the last two, signalCount and the Prometheus counter every one.
        await using var server = await StartPimaAsync(signalsKept: "2");
        await ScoreAndLabelAsync(server, flipped: true, rounds: 3);
        var up = (await ReportWhenChartsTookAsync(server, 996)).GetProperty("cusum").GetProperty("up");
        var count = up.GetProperty("signalCount").GetInt64();
        Assert.True(count > 2, $"the chart signalled {count} times");
        var kept = up.GetProperty("signals").EnumerateArray().Select(s => s.GetProperty("index").GetInt64()).ToList();
        Assert.Equal(2, kept.Count);
        Assert.True(kept[0] < kept[1]);

        var line = "";
        Assert.True(await Files.EventuallyAsync(async () =>
        {
            line = (await server.Http.GetStringAsync("/metrics")).Split('\n')
                .FirstOrDefault(l => l.StartsWith("scorer_monitor_cusum_signals_total{", StringComparison.Ordinal) && l.Contains("chart=\"up\"", StringComparison.Ordinal)) ?? "";
            return line.EndsWith(" " + count.ToString(CultureInfo.InvariantCulture), StringComparison.Ordinal);
        }, TimeSpan.FromSeconds(30)), line);
    }

    [Fact]
    public async Task Rows_far_from_the_baseline_give_the_psi_of_the_published_formula_and_a_refit_due_status()
    {
        // The invented pump model (examples/pump-bearings) carries a baseline: deciles of eta and of each numeric feature.
        _folder.AddModel(Files.Example("pump-bearings"), "pump.json");
        await using var server = await RunningServer.StartAsync(_folder);
        const string Row = "{\"vibration_rms\":9.5,\"bearing_temp_c\":88,\"hours_since_service\":7900,\"site\":\"river\"}";
        var text = await PostAndReadAsync(server, "/v1/models/pump-bearing-failure/score", "{\"rows\":[" + string.Join(",", Enumerable.Repeat(Row, 600)) + "]}");
        var eta = JsonDocument.Parse(text).RootElement.GetProperty("results")[0].GetProperty("eta").GetDouble();

        JsonElement report = default;
        Assert.True(await Files.EventuallyAsync(async () =>
        {
            report = await GetJsonAsync(server, "/v1/models/pump-bearing-failure/monitor?window=24h");
            return report.GetProperty("psi").GetProperty("rows").GetInt64() == 600;
        }, TimeSpan.FromSeconds(10)), report.ToString());

        // PSI = Σ (a − e) ln(a / e) over the baseline's bins, empty bins floored at 1e-4 (common practice): every row in
        // the bin of this eta.
        var baseline = JsonNode.Parse(File.ReadAllText(Files.Example("pump-bearings")))!["baseline"]!["linear_predictor"]!;
        var edges = baseline["edges"]!.AsArray().Select(e => (double)e!).ToList();
        var expected = baseline["proportions"]!.AsArray().Select(e => (double)e!).ToList();
        var bin = edges.Count(e => eta > e);
        var psi = expected.Select((e, b) => (a: b == bin ? 1.0 : 1e-4, e: Math.Max(e, 1e-4))).Sum(x => (x.a - x.e) * Math.Log(x.a / x.e));
        Assert.Equal(psi, report.GetProperty("psi").GetProperty("linearPredictor").GetDouble(), 1e-12);
        Assert.True(report.GetProperty("psi").GetProperty("features").GetProperty("vibration_rms").GetDouble() > 0.25);
        Assert.Equal("refit-due", report.GetProperty("status").GetString());
        Assert.Equal("refit", report.GetProperty("action").GetString());
        Assert.StartsWith("Refit due", report.GetProperty("advice").GetString(), StringComparison.Ordinal);
    }

    private static async Task<string> PostAndReadAsync(RunningServer server, string path, string body)
    {
        using var content = new StringContent(body, Encoding.UTF8, "application/json");
        using var response = await server.Http.PostAsync(path, content);
        Assert.Equal(HttpStatusCode.OK, response.StatusCode);
        return await response.Content.ReadAsStringAsync();
    }

    [Fact]
    public async Task After_a_restart_the_charts_continue_from_their_saved_state_not_from_a_replay()
    {
        string saved;
        await using (var server = await StartPimaAsync())
        {
            await ScoreAndLabelAsync(server, flipped: true); // flipped outcomes: the upward chart signals
            JsonElement report = default;
            Assert.True(await Files.EventuallyAsync(async () =>
            {
                report = await GetJsonAsync(server, "/v1/models/pima/monitor?window=all");
                return report.TryGetProperty("cusum", out var c) && c.TryGetProperty("up", out var up) && up.GetProperty("steps").GetInt64() == 332;
            }, TimeSpan.FromSeconds(30)), report.ToString());
            Assert.True(server.Service<Scorer.Monitor.Reporting.ChartRunner>().IsHolder);
            Assert.NotEqual(0, report.GetProperty("cusum").GetProperty("up").GetProperty("signals").GetArrayLength());
            var store = server.Service<IScorerStore>();
            Assert.True(await Files.EventuallyAsync(async () => await store.GetChartStateAsync("pima", "r-logit") is not null, TimeSpan.FromSeconds(10)));
            saved = (await store.GetChartStateAsync("pima", "r-logit"))!;
        }

        // Between the runs, the saved state is marked (the upward chart's value set to 1.25): a replay from the first
        // outcome would not show the mark, a continuation does.
        var state = JsonNode.Parse(saved)!;
        state["up"]!["value"] = 1.25;
        await using (var store = Scorer.Store.Sqlite.SqliteScorerStore.ForFile(_folder.Store))
        {
            await store.MigrateAsync();
            Assert.True(await store.TryHoldLeaseAsync(Scorer.Monitor.Reporting.ChartRunner.Lease));
            await store.SaveChartStateAsync("pima", "r-logit", state.ToJsonString(), Scorer.Monitor.Reporting.ChartRunner.Lease);
        }

        await using (var server = await StartPimaAsync())
        {
            JsonElement report = default;
            Assert.True(await Files.EventuallyAsync(async () =>
            {
                report = await GetJsonAsync(server, "/v1/models/pima/monitor?window=all");
                return report.TryGetProperty("cusum", out var c) && c.TryGetProperty("up", out _);
            }, TimeSpan.FromSeconds(30)), report.ToString());
            var up = report.GetProperty("cusum").GetProperty("up");
            Assert.Equal(1.25, up.GetProperty("value").GetDouble());
            Assert.Equal(332, up.GetProperty("steps").GetInt64());
        }
    }
}
