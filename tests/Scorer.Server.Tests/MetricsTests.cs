using System.Diagnostics;
using System.Net;
using System.Text;
using System.Text.Json;
using System.Text.RegularExpressions;

namespace Scorer.Server.Tests;

public sealed class MetricsTests : IAsyncLifetime
{
    private readonly TestFolder _folder = new();
    private RunningServer _server = null!;

    public async Task InitializeAsync()
    {
        _folder.AddModel(Files.Example("pump-bearings"), "pump.json");
        _server = await RunningServer.StartAsync(_folder);
    }

    public async Task DisposeAsync()
    {
        await _server.DisposeAsync();
        _folder.Dispose();
    }

    [Fact]
    public async Task Metrics_count_rows_errors_calls_and_the_log_name_totals_as_counters_and_promtool_finds_nothing_after_traffic()
    {
        var body = "{\"rows\":[{\"vibration_rms\":3.2,\"bearing_temp_c\":61,\"hours_since_service\":2500,\"site\":\"river\"},"
            + "{\"vibration_rms\":3.2,\"bearing_temp_c\":61,\"hours_since_service\":2500,\"site\":\"harbour\"}]}";
        using (var content = new StringContent(body, Encoding.UTF8, "application/json"))
        {
            Assert.Equal(HttpStatusCode.OK, (await _server.Http.PostAsync("/v1/models/pump-bearing-failure/score", content)).StatusCode);
        }

        // An outcome for the scored row, so that the monitor reports on the version and its gauges are exported too.
        using (var scored = JsonDocument.Parse(await (await _server.Http.PostAsync("/v1/models/pump-bearing-failure/score",
                   new StringContent(body.Replace(",{\"vibration_rms\":3.2,\"bearing_temp_c\":61,\"hours_since_service\":2500,\"site\":\"harbour\"}", "", StringComparison.Ordinal), Encoding.UTF8, "application/json"))).Content.ReadAsStringAsync()))
        {
            var id = scored.RootElement.GetProperty("results")[0].GetProperty("id").GetString();

            // The outcome joins a logged prediction: wait until the log has written it, or the outcome is unknown.
            var log = _server.Service<Scorer.Store.PredictionLog>();
            Assert.True(await Files.EventuallyAsync(() => Task.FromResult(log.Pending == 0), TimeSpan.FromSeconds(60)), $"the log still holds {log.Pending} rows");
            using var outcome = new StringContent($"{{\"outcomes\":[{{\"id\":\"{id}\",\"outcome\":1}}]}}", Encoding.UTF8, "application/json");
            using var recorded = await _server.Http.PostAsync("/v1/models/pump-bearing-failure/outcomes", outcome);
            Assert.Equal(HttpStatusCode.OK, recorded.StatusCode);
            using var receipt = JsonDocument.Parse(await recorded.Content.ReadAsStringAsync());
            Assert.Equal(1, receipt.RootElement.GetProperty("accepted").GetInt32());
        }

        var text = "";
        Assert.True(await Files.EventuallyAsync(async () =>
        {
            text = await _server.Http.GetStringAsync("/metrics");
            return text.Contains("scorer_monitor_labelled{model=\"pump-bearing-failure\",version=\"2026.11.1\",window=\"all\"} 1", StringComparison.Ordinal);
        }, TimeSpan.FromSeconds(60)), "the monitor did not report the labelled row");
        Assert.Contains("scorer_rows_scored_total{model=\"pump-bearing-failure\",version=\"2026.11.1\",stage=\"live\"} 2", text, StringComparison.Ordinal);
        Assert.Contains("scorer_row_errors_total{model=\"pump-bearing-failure\",kind=\"unknown_level\"} 1", text, StringComparison.Ordinal);
        Assert.Contains("scorer_call_duration_seconds_count{method=\"Scoring/Score\",status=\"OK\"} 2", text, StringComparison.Ordinal);
        Assert.Contains("scorer_model_versions{model=\"pump-bearing-failure\",stage=\"live\"} 1", text, StringComparison.Ordinal);
        Assert.Contains("scorer_prediction_log_queue_rows", text, StringComparison.Ordinal);

        // Anything counted since start is a counter named *_total (Prometheus's naming conventions), never a gauge.
        var types = Regex.Matches(text, @"(?m)^# TYPE (\S+) (\S+)$").ToDictionary(m => m.Groups[1].Value, m => m.Groups[2].Value, StringComparer.Ordinal);
        foreach (Match help in Regex.Matches(text, @"(?m)^# HELP (\S+) (.*)$"))
        {
            var name = help.Groups[1].Value;
            if (help.Groups[2].Value.Contains("since start", StringComparison.Ordinal) || types[name] == "counter")
            {
                Assert.True(types[name] == "counter" && name.EndsWith("_total", StringComparison.Ordinal), $"{name} is a {types[name]} of what happened since start");
            }
        }

        // The exposition format and its lint, by Prometheus's own promtool (Debian package prometheus): nothing to say.
        var promtool = new ProcessStartInfo("promtool", "check metrics") { RedirectStandardInput = true, RedirectStandardOutput = true, RedirectStandardError = true };
        using var process = Process.Start(promtool)!;
        await process.StandardInput.WriteAsync(text);
        process.StandardInput.Close();
        var errors = await process.StandardError.ReadToEndAsync() + await process.StandardOutput.ReadToEndAsync();
        await process.WaitForExitAsync();
        Assert.True(process.ExitCode == 0 && errors.Length == 0, "promtool check metrics: " + errors);
    }
}
