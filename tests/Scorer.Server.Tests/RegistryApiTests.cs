using Scorer.Host;
using System.Net;
using System.Net.Http.Headers;
using System.Text;
using System.Text.Json;
using Scorer.Store;

namespace Scorer.Server.Tests;

/// <summary>Hot reload, immutability of versions, stages, history, rollback, restart and API keys, over the real server.</summary>
public sealed class RegistryApiTests : IDisposable
{
    private readonly TestFolder _folder = new();

    public void Dispose() => _folder.Dispose();

    private static string WithVersion(string path, string version) =>
        File.ReadAllText(path).Replace("\"version\": \"2026.11.1\"", $"\"version\": \"{version}\"", StringComparison.Ordinal);

    private static async Task<JsonDocument> GetAsync(RunningServer s, string path)
    {
        var text = await s.Http.GetStringAsync(path);
        return JsonDocument.Parse(text);
    }

    private static async Task<(HttpStatusCode, JsonDocument)> PostAsync(RunningServer s, string path, string body, string? key = null)
    {
        using var request = new HttpRequestMessage(HttpMethod.Post, path) { Content = new StringContent(body, Encoding.UTF8, "application/json") };
        if (key is not null)
        {
            request.Headers.Authorization = new AuthenticationHeaderValue("Bearer", key);
        }

        using var response = await s.Http.SendAsync(request);
        var text = await response.Content.ReadAsStringAsync();
        return (response.StatusCode, JsonDocument.Parse(text.Length == 0 ? "{}" : text));
    }

    private static async Task<Dictionary<string, string>> StagesAsync(RunningServer s, string model)
    {
        using var json = await GetAsync(s, "/v1/models");
        var entry = json.RootElement.GetProperty("models").EnumerateArray().First(m => m.GetProperty("model").GetString() == model);
        return entry.GetProperty("versions").EnumerateArray().ToDictionary(v => v.GetProperty("version").GetString()!, v => v.GetProperty("stage").GetString()!);
    }

    private const string PumpRow = "{\"rows\":[{\"vibration_rms\":3.2,\"bearing_temp_c\":61,\"hours_since_service\":2500,\"site\":\"river\"}]}";

    [Fact]
    public async Task A_new_version_dropped_into_the_folder_serves_as_shadow_within_two_seconds_and_shadows_are_logged()
    {
        _folder.AddModel(Files.Example("pump-bearings"), "pump.json");
        await using var server = await RunningServer.StartAsync(_folder);
        Assert.Equal("live", (await StagesAsync(server, "pump-bearing-failure"))["2026.11.1"]);

        _folder.WriteModel("pump-v2.json", WithVersion(Files.Example("pump-bearings"), "2026.12.1"));
        Assert.True(await Files.EventuallyAsync(async () => (await StagesAsync(server, "pump-bearing-failure")).GetValueOrDefault("2026.12.1") == "shadow", TimeSpan.FromSeconds(2)));

        var (status, json) = await PostAsync(server, "/v1/models/pump-bearing-failure/score", PumpRow);
        Assert.Equal(HttpStatusCode.OK, status);
        Assert.Equal("2026.11.1", json.RootElement.GetProperty("version").GetString());
        var store = server.Service<IScorerStore>();
        Assert.True(await Files.EventuallyAsync(async () => await store.CountPredictionsAsync("pump-bearing-failure", "2026.12.1") == 1, TimeSpan.FromSeconds(5)));
        var shadow = (await store.GetPredictionsAsync("pump-bearing-failure", "2026.12.1", DateTimeOffset.MinValue.AddYears(2000), DateTimeOffset.MaxValue.AddYears(-1)))[0];
        Assert.Equal(Stage.Shadow, shadow.Stage);
    }

    [Fact]
    public async Task A_broken_file_is_listed_with_its_errors_and_the_old_version_keeps_serving()
    {
        _folder.AddModel(Files.Example("pump-bearings"), "pump.json");
        await using var server = await RunningServer.StartAsync(_folder);
        _folder.WriteModel("broken.json", WithVersion(Files.Example("pump-bearings"), "2026.12.9").Replace("\"link\": \"logit\"", "\"link\": \"logistic\"", StringComparison.Ordinal));
        Assert.True(await Files.EventuallyAsync(async () =>
        {
            using var j = await GetAsync(server, "/v1/models");
            return j.RootElement.GetProperty("loadErrors").GetArrayLength() == 1;
        }, TimeSpan.FromSeconds(3)));
        using var list = await GetAsync(server, "/v1/models");
        var error = list.RootElement.GetProperty("loadErrors")[0];
        Assert.Equal("broken.json", error.GetProperty("file").GetString());
        Assert.Contains(error.GetProperty("problems").EnumerateArray(), p => p.GetProperty("path").GetString() == "$.link");

        // The page's overview lists the same load errors in the same shape, byte for byte.
        using var overview = await GetAsync(server, "/v1/overview");
        Assert.Equal(list.RootElement.GetProperty("loadErrors").GetRawText(), overview.RootElement.GetProperty("loadErrors").GetRawText());
        var (status, json) = await PostAsync(server, "/v1/models/pump-bearing-failure/score", PumpRow);
        Assert.Equal(HttpStatusCode.OK, status);
        Assert.Equal("2026.11.1", json.RootElement.GetProperty("version").GetString());
    }

    [Fact]
    public async Task A_changed_file_with_the_same_version_is_refused_and_the_loaded_version_is_unchanged()
    {
        var path = _folder.AddModel(Files.Example("pump-bearings"), "pump.json");
        await using var server = await RunningServer.StartAsync(_folder);
        var (_, before) = await PostAsync(server, "/v1/models/pump-bearing-failure/score", PumpRow);
        File.WriteAllText(path, File.ReadAllText(path).Replace("\"threshold\": 0.15", "\"threshold\": 0.5", StringComparison.Ordinal));
        Assert.True(await Files.EventuallyAsync(async () =>
        {
            using var j = await GetAsync(server, "/v1/models");
            return j.RootElement.GetProperty("loadErrors").GetArrayLength() == 1;
        }, TimeSpan.FromSeconds(3)));
        using var list = await GetAsync(server, "/v1/models");
        Assert.Contains("a version never changes once loaded", list.RootElement.GetProperty("loadErrors")[0].GetProperty("problems")[0].GetProperty("reason").GetString(), StringComparison.Ordinal);
        var (_, after) = await PostAsync(server, "/v1/models/pump-bearing-failure/score", PumpRow);
        Assert.True(after.RootElement.TryGetProperty("results", out _), after.RootElement.ToString());
        Assert.True(before.RootElement.TryGetProperty("results", out _), before.RootElement.ToString());
        Assert.Equal(before.RootElement.GetProperty("results")[0].GetProperty("flag").GetBoolean(), after.RootElement.GetProperty("results")[0].GetProperty("flag").GetBoolean());
    }

    [Fact]
    public async Task Promotion_retires_the_previous_live_version_rollback_restores_it_and_history_records_every_change()
    {
        _folder.AddModel(Files.Example("pump-bearings"), "pump.json");
        _folder.WriteModel("pump-v2.json", WithVersion(Files.Example("pump-bearings"), "2026.12.1"));
        await using var server = await RunningServer.StartAsync(_folder);
        Assert.Equal(new Dictionary<string, string> { ["2026.11.1"] = "live", ["2026.12.1"] = "shadow" }, await StagesAsync(server, "pump-bearing-failure"));

        var (status, promoted) = await PostAsync(server, "/v1/models/pump-bearing-failure/versions/2026.12.1/stage", "{\"stage\":\"live\"}");
        Assert.Equal(HttpStatusCode.OK, status);
        Assert.Equal("2026.12.1", promoted.RootElement.GetProperty("live").GetString());
        Assert.Equal(new Dictionary<string, string> { ["2026.11.1"] = "retired", ["2026.12.1"] = "live" }, await StagesAsync(server, "pump-bearing-failure"));
        var (_, scored) = await PostAsync(server, "/v1/models/pump-bearing-failure/score", PumpRow);
        Assert.Equal("2026.12.1", scored.RootElement.GetProperty("version").GetString());

        var (rollbackStatus, rolled) = await PostAsync(server, "/v1/models/pump-bearing-failure/rollback", "{}");
        Assert.Equal(HttpStatusCode.OK, rollbackStatus);
        Assert.Equal("2026.11.1", rolled.RootElement.GetProperty("live").GetString());

        using var history = await GetAsync(server, "/v1/models/pump-bearing-failure/history");
        var changes = history.RootElement.GetProperty("changes").EnumerateArray()
            .Select(c => $"{c.GetProperty("version").GetString()}:{c.GetProperty("from").GetString()}->{c.GetProperty("to").GetString()}").ToList();
        Assert.Equal(
        [
            "2026.11.1:->live", "2026.12.1:->shadow",
            "2026.11.1:live->retired", "2026.12.1:shadow->live",
            "2026.12.1:live->retired", "2026.11.1:retired->live",
        ], changes);
    }

    [Fact]
    public async Task A_restart_keeps_the_stages_and_the_prediction_log()
    {
        _folder.AddModel(Files.Example("pump-bearings"), "pump.json");
        _folder.WriteModel("pump-v2.json", WithVersion(Files.Example("pump-bearings"), "2026.12.1"));
        await using (var first = await RunningServer.StartAsync(_folder))
        {
            await PostAsync(first, "/v1/models/pump-bearing-failure/versions/2026.12.1/stage", "{\"stage\":\"live\"}");
            await PostAsync(first, "/v1/models/pump-bearing-failure/score", PumpRow);
        }

        await using var second = await RunningServer.StartAsync(_folder);
        Assert.Equal("live", (await StagesAsync(second, "pump-bearing-failure"))["2026.12.1"]);
        Assert.Equal(1, await second.Service<IScorerStore>().CountPredictionsAsync("pump-bearing-failure", "2026.12.1"));
    }

    [Fact]
    public async Task Api_keys_decide_who_may_score_and_who_may_change_stages()
    {
        _folder.AddModel(Files.Example("pump-bearings"), "pump.json");
        await using var server = await RunningServer.StartAsync(_folder, new Dictionary<string, string?>
        {
            ["Scorer:Keys:0:Name"] = "ops-dashboard",
            ["Scorer:Keys:0:Key"] = "score-key-0123456789",
            ["Scorer:Keys:0:Roles:0"] = "score",
            ["Scorer:Keys:1:Name"] = "ml-engineer",
            ["Scorer:Keys:1:Key"] = "admin-key-0123456789",
            ["Scorer:Keys:1:Roles:0"] = "admin",
        });
        Assert.Equal(HttpStatusCode.Unauthorized, (await PostAsync(server, "/v1/models/pump-bearing-failure/score", PumpRow)).Item1);
        Assert.Equal(HttpStatusCode.Unauthorized, (await PostAsync(server, "/v1/models/pump-bearing-failure/score", PumpRow, "wrong-key-0123456789")).Item1);
        Assert.Equal(HttpStatusCode.OK, (await PostAsync(server, "/v1/models/pump-bearing-failure/score", PumpRow, "score-key-0123456789")).Item1);
        var (forbidden, json) = await PostAsync(server, "/v1/models/pump-bearing-failure/versions/2026.11.1/stage", "{\"stage\":\"retired\"}", "score-key-0123456789");
        Assert.Equal(HttpStatusCode.Forbidden, forbidden);
        Assert.Contains("lacks the 'admin' role", json.RootElement.GetProperty("message").GetString(), StringComparison.Ordinal);
        var (ok, changed) = await PostAsync(server, "/v1/models/pump-bearing-failure/versions/2026.11.1/stage", "{\"stage\":\"retired\"}", "admin-key-0123456789");
        Assert.Equal(HttpStatusCode.OK, ok);
        Assert.Equal("ml-engineer", changed.RootElement.GetProperty("changes")[0].GetProperty("actor").GetString());
    }

    [Fact]
    public async Task Binding_beyond_loopback_without_keys_refuses_to_start_and_says_why()
    {
        var ex = await Assert.ThrowsAsync<Microsoft.Extensions.Options.OptionsValidationException>(() =>
            ScorerServer.BuildAsync(["--models", _folder.Models, "--store", _folder.Store, "--http", "0.0.0.0:0", "--grpc", "127.0.0.1:0"]));
        Assert.Contains(ex.Failures, f => f.Contains("no API keys are configured", StringComparison.Ordinal));
    }

    [Fact]
    public async Task A_body_over_the_size_limit_gets_413()
    {
        _folder.AddModel(Files.Example("pump-bearings"), "pump.json");
        await using var server = await RunningServer.StartAsync(_folder, new Dictionary<string, string?> { ["Scorer:MaxRequestBodyBytes"] = "4096" });
        var rows = string.Join(",", Enumerable.Repeat("{\"vibration_rms\":3.2,\"bearing_temp_c\":61,\"hours_since_service\":2500,\"site\":\"river\"}", 100));
        var (status, _) = await PostAsync(server, "/v1/models/pump-bearing-failure/score", "{\"rows\":[" + rows + "]}");
        Assert.Equal(HttpStatusCode.RequestEntityTooLarge, status);
        var (ok, _) = await PostAsync(server, "/v1/models/pump-bearing-failure/score", PumpRow);
        Assert.Equal(HttpStatusCode.OK, ok);
    }

    [Fact]
    public async Task Requests_beyond_the_rate_limit_get_429()
    {
        _folder.AddModel(Files.Example("pump-bearings"), "pump.json");
        await using var server = await RunningServer.StartAsync(_folder, new Dictionary<string, string?> { ["Scorer:RateLimitPerSecond"] = "3" });
        // 30 requests at once: the bucket holds 3 and refills 3 a second, so most are refused however slow the machine.
        var statuses = new List<HttpStatusCode>();
        for (var i = 0; i < 30; i++)
        {
            statuses.Add((await PostAsync(server, "/v1/models/pump-bearing-failure/score", PumpRow)).Item1);
        }

        Assert.Contains(HttpStatusCode.OK, statuses);
        Assert.Contains(HttpStatusCode.TooManyRequests, statuses);
    }
}
