using System.Diagnostics;
using System.Net;
using System.Text;

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
    public async Task Metrics_count_rows_errors_calls_and_the_log_and_pass_promtool()
    {
        var body = "{\"rows\":[{\"vibration_rms\":3.2,\"bearing_temp_c\":61,\"hours_since_service\":2500,\"site\":\"river\"},"
            + "{\"vibration_rms\":3.2,\"bearing_temp_c\":61,\"hours_since_service\":2500,\"site\":\"harbour\"}]}";
        using (var content = new StringContent(body, Encoding.UTF8, "application/json"))
        {
            Assert.Equal(HttpStatusCode.OK, (await _server.Http.PostAsync("/v1/models/pump-bearing-failure/score", content)).StatusCode);
        }

        var text = await _server.Http.GetStringAsync("/metrics");
        Assert.Contains("scorer_rows_scored_total{model=\"pump-bearing-failure\",version=\"2026.11.1\",stage=\"live\"} 1", text, StringComparison.Ordinal);
        Assert.Contains("scorer_row_errors_total{model=\"pump-bearing-failure\",kind=\"unknown_level\"} 1", text, StringComparison.Ordinal);
        Assert.Contains("scorer_call_duration_seconds_count{method=\"Scoring/Score\",status=\"OK\"} 1", text, StringComparison.Ordinal);
        Assert.Contains("scorer_model_versions{model=\"pump-bearing-failure\",stage=\"live\"} 1", text, StringComparison.Ordinal);
        Assert.Contains("scorer_prediction_log_queue_rows", text, StringComparison.Ordinal);

        // The exposition format, checked by Prometheus's own promtool (Debian package prometheus).
        var promtool = new ProcessStartInfo("promtool", "check metrics") { RedirectStandardInput = true, RedirectStandardOutput = true, RedirectStandardError = true };
        using var process = Process.Start(promtool)!;
        await process.StandardInput.WriteAsync(text);
        process.StandardInput.Close();
        var errors = await process.StandardError.ReadToEndAsync() + await process.StandardOutput.ReadToEndAsync();
        await process.WaitForExitAsync();
        Assert.True(process.ExitCode == 0, "promtool check metrics: " + errors);
    }
}
