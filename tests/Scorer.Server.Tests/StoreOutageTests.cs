using System.Net;
using System.Net.Http.Headers;
using System.Text;
using System.Text.Json;
using Google.Protobuf.WellKnownTypes;
using Grpc.Core;
using Scorer.Store;
using Scorer.Transport.V1;
using Xunit.Abstractions;

namespace Scorer.Server.Tests;

/// <summary>
/// The service over a PostgreSQL server of the test's own that the test stops and starts again: while the store is
/// down, every kind of call (gRPC unary, client-, server- and bidirectional streaming; REST transcoded, direct, the
/// page's JSON, the event streams, the export) answers from memory or as Unavailable (503) in the one error shape,
/// saying the store did not answer and what was or was not recorded; never as an unknown error or an empty 500. Once
/// the store is back, what was refused can be sent again.
/// </summary>
public sealed class StoreOutageTests(ITestOutputHelper output) : IAsyncLifetime
{
    public const string NothingRecorded = "nothing of this call was recorded";
    private const string Model = "pump-bearing-failure";
    private const string Version = "2026.11.1";
    private const string Row = "{\"vibration_rms\":3.1,\"bearing_temp_c\":55.5,\"hours_since_service\":1200,\"site\":\"east\"}";

    private readonly TestFolder _folder = new();
    private StoppablePostgres _postgres = null!;
    private RunningServer _server = null!;

    public async Task InitializeAsync()
    {
        _folder.AddModel(Files.Example("pump-bearings"), "pump.json");
        _postgres = await StoppablePostgres.StartAsync();
        _server = await RunningServer.StartAsync(_folder, new Dictionary<string, string?>
        {
            ["Scorer:Store:Kind"] = "postgres",
            ["Scorer:Store:ConnectionString"] = _postgres.ConnectionString,
            ["Scorer:Monitor:PollInterval"] = "00:00:00.100",
            ["Scorer:Monitor:ReportInterval"] = "00:00:00.250",
        });
    }

    public async Task DisposeAsync()
    {
        await _server.DisposeAsync();
        await _postgres.DisposeAsync();
        _folder.Dispose();
    }

    [StoppablePostgresFact]
    public async Task Grpc_calls_of_every_kind_answer_a_store_outage_as_unavailable_saying_what_was_recorded()
    {
        var ids = await ScoreAsync(3);
        var outcomes = new Outcomes.OutcomesClient(_server.Channel);
        var store = _server.Service<IScorerStore>();

        // A client stream whose first message is recorded while the store is up, and whose second meets the outage.
        using var stream = outcomes.RecordOutcomesStream();
        await stream.RequestStream.WriteAsync(Report(ids[0], 1));
        Assert.True(await Files.EventuallyAsync(async () => (await LabelledAsync(store)).Contains(ids[0]), TimeSpan.FromSeconds(30)),
            "the stream's first message was not recorded");
        await _postgres.StopAsync();
        await stream.RequestStream.WriteAsync(Report(ids[1], 0));
        await stream.RequestStream.CompleteAsync();
        var streamed = await Assert.ThrowsAsync<RpcException>(async () => await stream.ResponseAsync);
        AssertStoreDidNotAnswer(streamed, "message 1 of this stream was recorded");
        Assert.Contains("nothing from message 2 on was", streamed.Status.Detail, StringComparison.Ordinal);

        // Unary.
        var unary = await Assert.ThrowsAsync<RpcException>(async () => await outcomes.RecordOutcomesAsync(Report(ids[1], 0)));
        AssertStoreDidNotAnswer(unary, NothingRecorded);

        // Server streaming: the first report needs the store.
        var monitor = new Scorer.Transport.V1.Monitor.MonitorClient(_server.Channel);
        using var watch = monitor.WatchReports(new MonitorRequest { Model = Model, Window = "all" });
        var watched = await Assert.ThrowsAsync<RpcException>(async () => await watch.ResponseStream.MoveNext(CancellationToken.None));
        AssertStoreDidNotAnswer(watched, NothingRecorded + "; 0 messages had been sent before it ended");

        // Bidirectional streaming: scoring never waits for the store, so the stream answers through the outage.
        using var scoring = new Scoring.ScoringClient(_server.Channel).ScoreStream();
        await scoring.RequestStream.WriteAsync(new ScoreRequest { Model = Model, Rows = { Struct.Parser.ParseJson(Row) } });
        Assert.True(await scoring.ResponseStream.MoveNext(CancellationToken.None));
        Assert.Single(scoring.ResponseStream.Current.Results);
        Assert.False(string.IsNullOrEmpty(scoring.ResponseStream.Current.Results[0].Id));
        await scoring.RequestStream.CompleteAsync();
        Assert.False(await scoring.ResponseStream.MoveNext(CancellationToken.None));

        // The refusals are counted as Unavailable, not as OK or Unknown.
        var metrics = await _server.Http.GetStringAsync("/metrics");
        Assert.Contains("scorer_call_duration_seconds_count{method=\"Outcomes/RecordOutcomesStream\",status=\"Unavailable\"} 1", metrics, StringComparison.Ordinal);
        Assert.Contains("scorer_call_duration_seconds_count{method=\"Monitor/WatchReports\",status=\"Unavailable\"} 1", metrics, StringComparison.Ordinal);

        // Back: what was refused is sent again, and exactly what was acknowledged or resent is recorded.
        await _postgres.RestartAsync();
        await WaitReadyAsync();
        var again = await outcomes.RecordOutcomesAsync(Report(ids[1], 0));
        Assert.Equal(1, again.Accepted);
        var labelled = await LabelledAsync(store);
        Assert.Equal(new[] { ids[0], ids[1] }.Order(StringComparer.Ordinal), labelled.Order(StringComparer.Ordinal));
        Assert.DoesNotContain(ids[2], labelled);
    }

    [StoppablePostgresFact]
    public async Task Rest_routes_answer_a_store_outage_from_memory_or_as_503_in_the_error_shape_never_as_500()
    {
        var ids = await ScoreAsync(2);
        using (var recorded = await PostAsync($"/v1/models/{Model}/outcomes", $"{{\"outcomes\":[{{\"id\":\"{ids[0]}\",\"outcome\":1}}]}}"))
        {
            Assert.Equal(HttpStatusCode.OK, recorded.StatusCode);
        }

        await _postgres.StopAsync();

        // Routes that read the store: refused before anything of the answer is sent.
        string[] needTheStore =
        [
            "/v1/overview", "/v1/overview/events", $"/v1/models/{Model}/monitor?window=all", $"/v1/models/{Model}/monitor/events?window=all",
            $"/v1/models/{Model}/history", $"/v1/models/{Model}/labelled",
        ];
        foreach (var path in needTheStore)
        {
            using var response = await _server.Http.GetAsync(path, HttpCompletionOption.ResponseHeadersRead);
            await AssertStoreDidNotAnswerAsync(response, NothingRecorded, path);
        }

        // Writes: refused, nothing recorded.
        (string Path, string Body)[] writes =
        [
            ($"/v1/models/{Model}/outcomes", $"{{\"outcomes\":[{{\"id\":\"{ids[1]}\",\"outcome\":0}}]}}"),
            ($"/v1/models/{Model}/versions/{Version}/stage", "{\"stage\":\"retired\"}"),
            ($"/v1/models/{Model}/versions/{Version}/recalibrate", "{\"window\":\"all\"}"),
        ];
        foreach (var (path, body) in writes)
        {
            using var response = await PostAsync(path, body);
            await AssertStoreDidNotAnswerAsync(response, NothingRecorded, path);
        }

        // Every other route answers from memory, or refuses the same way; none fails as an unknown error.
        string[] others =
        [
            "/v1/models", $"/v1/models/{Model}/versions/{Version}", $"/v1/models/{Model}/monitor/trend?window=all", $"/v1/models/{Model}/monitor/cusum?window=all",
            "/metrics", "/healthz", "/", $"/models/{Model}",
        ];
        foreach (var path in others)
        {
            using var response = await _server.Http.GetAsync(path, HttpCompletionOption.ResponseHeadersRead);
            output.WriteLine($"{path}: {(int)response.StatusCode}");
            if (response.StatusCode != HttpStatusCode.OK)
            {
                await AssertStoreDidNotAnswerAsync(response, NothingRecorded, path);
            }
        }

        // Scoring goes on (direct REST), and readiness says the service is degraded, not down.
        using (var scored = await PostAsync($"/v1/models/{Model}/score", $"{{\"rows\":[{Row}]}}"))
        {
            Assert.Equal(HttpStatusCode.OK, scored.StatusCode);
        }

        using (var ready = await _server.Http.GetAsync("/readyz"))
        {
            Assert.Equal(HttpStatusCode.OK, ready.StatusCode);
            Assert.StartsWith("degraded: store unreachable", await ready.Content.ReadAsStringAsync(), StringComparison.Ordinal);
        }

        // Back: the refused report goes in.
        await _postgres.RestartAsync();
        await WaitReadyAsync();
        using (var again = await PostAsync($"/v1/models/{Model}/outcomes", $"{{\"outcomes\":[{{\"id\":\"{ids[1]}\",\"outcome\":0}}]}}"))
        {
            Assert.Equal(HttpStatusCode.OK, again.StatusCode);
            using var json = JsonDocument.Parse(await again.Content.ReadAsStringAsync());
            Assert.Equal(1, json.RootElement.GetProperty("accepted").GetInt32());
        }

        using var overview = await _server.Http.GetAsync("/v1/overview");
        Assert.Equal(HttpStatusCode.OK, overview.StatusCode);
    }

    /// <summary>A REST answer to a store outage: 503, JSON in the one error shape, naming the field <c>store</c>, saying <paramref name="recorded"/>.</summary>
    public static async Task AssertStoreDidNotAnswerAsync(HttpResponseMessage response, string recorded, string? what = null)
    {
        var text = await response.Content.ReadAsStringAsync();
        Assert.True(response.StatusCode == HttpStatusCode.ServiceUnavailable, $"{what}: {(int)response.StatusCode} {text}");
        Assert.Equal(new MediaTypeHeaderValue("application/json") { CharSet = "utf-8" }.MediaType, response.Content.Headers.ContentType?.MediaType);
        using var json = JsonDocument.Parse(text);
        Assert.Equal((int)StatusCode.Unavailable, json.RootElement.GetProperty("code").GetInt32());
        var message = json.RootElement.GetProperty("message").GetString()!;
        Assert.StartsWith("store: did not answer", message, StringComparison.Ordinal);
        Assert.Contains(recorded, message, StringComparison.Ordinal);
        var violation = json.RootElement.GetProperty("details")[0].GetProperty("fieldViolations")[0];
        Assert.Equal("store", violation.GetProperty("field").GetString());
    }

    private static void AssertStoreDidNotAnswer(RpcException ex, string recorded)
    {
        Assert.Equal(StatusCode.Unavailable, ex.StatusCode);
        Assert.StartsWith("store: did not answer", ex.Status.Detail, StringComparison.Ordinal);
        Assert.Contains(recorded, ex.Status.Detail, StringComparison.Ordinal);
        var details = ex.GetRpcStatus()!.Details.Single(d => d.Is(Google.Rpc.BadRequest.Descriptor)).Unpack<Google.Rpc.BadRequest>();
        Assert.Equal("store", Assert.Single(details.FieldViolations).Field);
    }

    private static RecordOutcomesRequest Report(string id, int outcome) => new() { Model = Model, Outcomes = { new OutcomeEntry { Id = id, Outcome = outcome } } };

    /// <summary>Scores <paramref name="n"/> rows over REST and waits until the prediction log has stored them.</summary>
    private async Task<List<string>> ScoreAsync(int n)
    {
        using var response = await PostAsync($"/v1/models/{Model}/score", "{\"rows\":[" + string.Join(",", Enumerable.Repeat(Row, n)) + "]}");
        Assert.Equal(HttpStatusCode.OK, response.StatusCode);
        using var json = JsonDocument.Parse(await response.Content.ReadAsStringAsync());
        var ids = json.RootElement.GetProperty("results").EnumerateArray().Select(r => r.GetProperty("id").GetString()!).ToList();
        var store = _server.Service<IScorerStore>();
        Assert.True(await Files.EventuallyAsync(async () => await store.CountPredictionsAsync(Model) == n, TimeSpan.FromSeconds(30)), "the rows were not logged");
        return ids;
    }

    private async Task<List<string>> LabelledAsync(IScorerStore store) =>
        [.. (await store.GetLabelledAsync(Model, null, DateTimeOffset.UnixEpoch, DateTimeOffset.MaxValue.AddYears(-1))).Select(l => l.Id.ToString())];

    private async Task<HttpResponseMessage> PostAsync(string path, string body)
    {
        using var content = new StringContent(body, Encoding.UTF8, "application/json");
        return await _server.Http.PostAsync(path, content);
    }

    private async Task WaitReadyAsync() => Assert.True(await Files.EventuallyAsync(async () =>
    {
        using var ready = await _server.Http.GetAsync("/readyz");
        return ready.StatusCode == HttpStatusCode.OK && await ready.Content.ReadAsStringAsync() == "ready\n";
    }, TimeSpan.FromSeconds(60)), "the service did not become ready once the store was back");
}
