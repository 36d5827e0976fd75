using System.Net;
using System.Net.Http.Headers;
using System.Text;
using System.Text.Json;
using Grpc.Core;
using Scorer.Transport.V1;

namespace Scorer.Server.Tests;

/// <summary>
/// One authentication scheme and one set of role policies for gRPC, transcoded REST, direct REST, the event streams,
/// the export and the page's data: each refusal in the API's error shape, naming the role the call needs.
/// </summary>
public sealed class AuthorizationTests : IAsyncLifetime
{
    private const string ScoreKey = "score-key-0123456789", OutcomesKey = "outcomes-key-0123456789", AdminKey = "admin-key-0123456789";
    private readonly TestFolder _folder = new();
    private RunningServer _server = null!;

    public async Task InitializeAsync()
    {
        _folder.AddModel(Files.Reference("pima-logit.model.json"), "pima.json");
        _server = await RunningServer.StartAsync(_folder, new Dictionary<string, string?>
        {
            ["Scorer:Keys:0:Name"] = "scoring-system",
            ["Scorer:Keys:0:Key"] = ScoreKey,
            ["Scorer:Keys:0:Roles:0"] = "score",
            ["Scorer:Keys:1:Name"] = "labelling-system",
            ["Scorer:Keys:1:Key"] = OutcomesKey,
            ["Scorer:Keys:1:Roles:0"] = "outcomes",
            ["Scorer:Keys:2:Name"] = "operator",
            ["Scorer:Keys:2:Key"] = AdminKey,
            ["Scorer:Keys:2:Roles:0"] = "admin",
        });
    }

    public async Task DisposeAsync()
    {
        await _server.DisposeAsync();
        _folder.Dispose();
    }

    private async Task<(HttpStatusCode Status, string Body)> RestAsync(HttpMethod method, string path, string? key, string? json = null)
    {
        using var request = new HttpRequestMessage(method, path);
        if (key is not null)
        {
            request.Headers.Authorization = new AuthenticationHeaderValue("Bearer", key);
        }

        if (json is not null)
        {
            request.Content = new StringContent(json, Encoding.UTF8, "application/json");
        }

        using var response = await _server.Http.SendAsync(request, HttpCompletionOption.ResponseHeadersRead);
        // An event stream that was let through is not read to its end: its status and type say enough.
        var body = response.Content.Headers.ContentType?.MediaType == "text/event-stream" ? "" : await response.Content.ReadAsStringAsync();
        return (response.StatusCode, body);
    }

    public static TheoryData<string, string, string?, string> RestCalls => new()
    {
        // method, path, body, the role it needs
        { "POST", "/v1/models/pima/score", "{\"rows\":[{\"npreg\":1,\"glu\":120,\"bmi\":31.5,\"ped\":0.4,\"age\":35}]}", "score" },
        { "GET", "/v1/models", null, "score" },
        { "GET", "/v1/models/pima/monitor?window=all", null, "score" },
        { "GET", "/v1/models/pima/monitor/events?window=all", null, "score" },
        { "GET", "/v1/overview", null, "score" },
        { "GET", "/v1/models/pima/monitor/trend?window=all", null, "score" },
        { "POST", "/v1/models/pima/outcomes", "{\"outcomes\":[{\"key\":\"k\",\"outcome\":1}]}", "outcomes" },
        { "GET", "/v1/models/pima/labelled", null, "admin" },
        { "POST", "/v1/models/pima/versions/r-logit/stage", "{\"stage\":\"live\"}", "admin" },
    };

    [Theory]
    [MemberData(nameof(RestCalls))]
    public async Task Every_REST_route_refuses_a_missing_key_with_401_a_key_without_the_role_with_403_and_lets_the_role_and_admin_through(
        string method, string path, string? body, string role)
    {
        var verb = new HttpMethod(method);
        var (missing, missingBody) = await RestAsync(verb, path, null, body);
        Assert.Equal(HttpStatusCode.Unauthorized, missing);
        using (var error = JsonDocument.Parse(missingBody))
        {
            Assert.Equal((int)StatusCode.Unauthenticated, error.RootElement.GetProperty("code").GetInt32());
            Assert.Contains("Authorization: Bearer", error.RootElement.GetProperty("message").GetString(), StringComparison.Ordinal);
        }

        var (unknown, unknownBody) = await RestAsync(verb, path, "not-a-key-of-this-service", body);
        Assert.Equal(HttpStatusCode.Unauthorized, unknown);
        Assert.Contains("not known", unknownBody, StringComparison.Ordinal);

        var without = role == "score" ? OutcomesKey : ScoreKey;
        var (refused, refusedBody) = await RestAsync(verb, path, without, body);
        Assert.Equal(HttpStatusCode.Forbidden, refused);
        using (var error = JsonDocument.Parse(refusedBody))
        {
            Assert.Equal((int)StatusCode.PermissionDenied, error.RootElement.GetProperty("code").GetInt32());
            Assert.Contains($"lacks the '{role}' role", error.RootElement.GetProperty("message").GetString(), StringComparison.Ordinal);
        }

        foreach (var key in role == "admin" ? [AdminKey] : new[] { role == "score" ? ScoreKey : OutcomesKey, AdminKey })
        {
            var (allowed, allowedBody) = await RestAsync(verb, path, key, body);
            Assert.True(allowed is not (HttpStatusCode.Unauthorized or HttpStatusCode.Forbidden), $"{method} {path} with the {role} role: {allowed} {allowedBody}");
        }
    }

    [Fact]
    public async Task Health_metrics_and_the_page_itself_need_no_key()
    {
        foreach (var path in new[] { "/healthz", "/readyz", "/metrics", "/", "/models/pima" })
        {
            var (status, _) = await RestAsync(HttpMethod.Get, path, null);
            Assert.Equal(HttpStatusCode.OK, status);
        }
    }

    private static Metadata Bearer(string key) => new() { { "authorization", "Bearer " + key } };

    [Fact]
    public async Task Every_gRPC_call_kind_is_refused_in_the_gRPC_status_naming_the_role_and_the_actor_is_the_key_name()
    {
        var scoring = new Scoring.ScoringClient(_server.Channel);
        var request = new ScoreRequest { Model = "pima", Rows = { Google.Protobuf.WellKnownTypes.Struct.Parser.ParseJson("{\"npreg\":1,\"glu\":120,\"bmi\":31.5,\"ped\":0.4,\"age\":35}") } };

        // Unary, without a key and with a key that lacks the role.
        var none = await Assert.ThrowsAsync<RpcException>(async () => await scoring.ScoreAsync(request));
        Assert.Equal(StatusCode.Unauthenticated, none.StatusCode);
        Assert.Contains("Authorization: Bearer", none.Status.Detail, StringComparison.Ordinal);
        var models = new Models.ModelsClient(_server.Channel);
        var denied = await Assert.ThrowsAsync<RpcException>(async () =>
            await models.SetStageAsync(new SetStageRequest { Model = "pima", Version = "r-logit", Stage = "live" }, Bearer(ScoreKey)));
        Assert.Equal(StatusCode.PermissionDenied, denied.StatusCode);
        Assert.Contains("lacks the 'admin' role", denied.Status.Detail, StringComparison.Ordinal);
        var details = Grpc.Core.RpcExceptionExtensions.GetRpcStatus(denied)!.Details.Single().Unpack<Google.Rpc.BadRequest>();
        Assert.Equal("authorization", details.FieldViolations.Single().Field); // the BadRequest details every error carries

        // Duplex streaming.
        using (var stream = scoring.ScoreStream(Bearer(OutcomesKey)))
        {
            // Refused at the call's headers: nothing is written (a write could race the refusal), the answer is awaited.
            var refused = await Assert.ThrowsAsync<RpcException>(async () => await stream.ResponseStream.MoveNext());
            Assert.Equal(StatusCode.PermissionDenied, refused.StatusCode);
        }

        // Client streaming.
        var outcomes = new Outcomes.OutcomesClient(_server.Channel);
        using (var stream = outcomes.RecordOutcomesStream(Bearer(ScoreKey)))
        {
            var refused = await Assert.ThrowsAsync<RpcException>(async () => await stream.ResponseAsync);
            Assert.Equal(StatusCode.PermissionDenied, refused.StatusCode);
            Assert.Contains("lacks the 'outcomes' role", refused.Status.Detail, StringComparison.Ordinal);
        }

        // Server streaming.
        var monitor = new Scorer.Transport.V1.Monitor.MonitorClient(_server.Channel);
        using (var watch = monitor.WatchReports(new MonitorRequest { Model = "pima", Window = "all" }))
        {
            var refused = await Assert.ThrowsAsync<RpcException>(async () => await watch.ResponseStream.MoveNext());
            Assert.Equal(StatusCode.Unauthenticated, refused.StatusCode);
        }

        // Let through with the role; the stage change records the key's name as its actor.
        Assert.Single((await scoring.ScoreAsync(request, Bearer(ScoreKey))).Results);
        await models.SetStageAsync(new SetStageRequest { Model = "pima", Version = "r-logit", Stage = "shadow" }, Bearer(AdminKey));
        var history = await models.GetHistoryAsync(new GetHistoryRequest { Model = "pima" }, Bearer(ScoreKey));
        Assert.Equal("operator", history.Changes[^1].Actor);

        // Refusals are counted, by reason: above, two without a usable key and three with a key lacking the role.
        var metrics = await _server.Http.GetStringAsync(new Uri("/metrics", UriKind.Relative));
        Assert.Contains("scorer_calls_refused_total{reason=\"unauthenticated\"} 2", metrics, StringComparison.Ordinal);
        Assert.Contains("scorer_calls_refused_total{reason=\"forbidden\"} 3", metrics, StringComparison.Ordinal);
    }
}
