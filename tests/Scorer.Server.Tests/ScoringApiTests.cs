using System.Globalization;
using System.Net;
using System.Text;
using System.Text.Json;
using Google.Protobuf.WellKnownTypes;
using Grpc.Core;
using Scorer.Transport.V1;

namespace Scorer.Server.Tests;

public sealed class ScoringApiTests : IAsyncLifetime
{
    private readonly TestFolder _folder = new();
    private RunningServer _server = null!;

    public async Task InitializeAsync()
    {
        // A model file written by R from glm() on MASS::birthwt (tests/reference/scoring-reference.R).
        _folder.AddModel(Files.Reference("birthwt-logit.model.json"), "birthwt.json");
        _server = await RunningServer.StartAsync(_folder, new Dictionary<string, string?> { ["Scorer:Limits:MaxRows"] = "500" });
    }

    public async Task DisposeAsync()
    {
        await _server.DisposeAsync();
        _folder.Dispose();
    }

    private static List<Dictionary<string, string>> Rows()
    {
        var lines = File.ReadAllLines(Files.Reference("birthwt.rows.csv"));
        var header = lines[0].Split(',').Select(h => h.Trim('"')).ToArray();
        return [.. lines.Skip(1).Select(l => l.Split(',').Select((v, i) => (header[i], v.Trim('"'))).ToDictionary(p => p.Item1, p => p.Item2))];
    }

    private static string RowJson(Dictionary<string, string> row) => "{" + string.Join(",", row.Select(p =>
        p.Key == "race" ? $"\"{p.Key}\":\"{p.Value}\"" : $"\"{p.Key}\":{p.Value}")) + "}";

    private async Task<(HttpStatusCode Status, JsonDocument Json)> PostAsync(string path, string body)
    {
        using var content = new StringContent(body, Encoding.UTF8, "application/json");
        using var response = await _server.Http.PostAsync(path, content);
        var text = await response.Content.ReadAsStringAsync();
        return (response.StatusCode, JsonDocument.Parse(text.Length == 0 ? "{}" : text));
    }

    [Fact]
    public async Task Rest_scores_agree_with_R_predict_glm_through_the_whole_service()
    {
        // R: predict(glm(...), newdata, type = "link", se.fit = TRUE) on birthwt (scoring-reference.R); 1e-9 relative.
        var rows = Rows();
        var expected = File.ReadAllLines(Files.Reference("birthwt-logit.expected.csv")).Skip(1).Select(l => l.Split(',').Select(v => double.Parse(v, CultureInfo.InvariantCulture)).ToArray()).ToList();
        var (status, json) = await PostAsync("/v1/models/birthwt/score", "{\"rows\":[" + string.Join(",", rows.Select(RowJson)) + "]}");
        Assert.Equal(HttpStatusCode.OK, status);
        var results = json.RootElement.GetProperty("results").EnumerateArray().ToList();
        Assert.Equal(rows.Count, results.Count);
        for (var i = 0; i < rows.Count; i++)
        {
            var r = results[i];
            Assert.Equal(JsonValueKind.Null, r.GetProperty("error").ValueKind);
            foreach (var (name, col) in new[] { ("eta", 0), ("se", 1), ("probability", 2), ("lower", 3), ("upper", 4) })
            {
                var got = r.GetProperty(name).GetDouble();
                Assert.True(Math.Abs(got - expected[i][col]) <= 1e-9 * Math.Abs(expected[i][col]), $"row {i + 1} {name}: {got:R} vs R {expected[i][col]:R}");
            }
        }
    }

    [Fact]
    public async Task Rest_and_grpc_and_the_dense_form_give_identical_numbers()
    {
        var rows = Rows().Take(50).ToList();
        var (_, json) = await PostAsync("/v1/models/birthwt/score", "{\"rows\":[" + string.Join(",", rows.Select(RowJson)) + "],\"level\":0.9}");
        var rest = json.RootElement.GetProperty("results").EnumerateArray().ToList();

        var client = new Scoring.ScoringClient(_server.Channel);
        var request = new ScoreRequest { Model = "birthwt", Level = 0.9 };
        foreach (var row in rows)
        {
            var s = new Struct();
            foreach (var (k, v) in row)
            {
                s.Fields[k] = k == "race" ? Value.ForString(v) : Value.ForNumber(double.Parse(v, CultureInfo.InvariantCulture));
            }

            request.Rows.Add(s);
        }

        var grpc = await client.ScoreAsync(request);
        var levels = new[] { "white", "black", "other" };
        var features = new[] { "age", "lwt", "race", "smoke", "ht", "ui", "ptl" };
        var dense = new DenseScoreRequest { Model = "birthwt", Level = 0.9 };
        dense.Features.AddRange(features);
        foreach (var row in rows)
        {
            dense.Values.AddRange(features.Select(f => f == "race" ? Array.IndexOf(levels, row[f]) : double.Parse(row[f], CultureInfo.InvariantCulture)));
        }

        using var stream = client.ScoreDenseStream();
        await stream.RequestStream.WriteAsync(dense);
        await stream.RequestStream.CompleteAsync();
        Assert.True(await stream.ResponseStream.MoveNext(CancellationToken.None));
        var d = stream.ResponseStream.Current;
        for (var i = 0; i < rows.Count; i++)
        {
            Assert.Equal(rest[i].GetProperty("eta").GetDouble(), grpc.Results[i].Eta);
            Assert.Equal(rest[i].GetProperty("upper").GetDouble(), grpc.Results[i].Upper);
            Assert.Equal(grpc.Results[i].Eta, d.Eta[i], 12);
            Assert.Equal(grpc.Results[i].Se, d.Se[i], 12);
            Assert.Equal(grpc.Results[i].Lower, d.Lower[i], 12);
        }
    }

    [Fact]
    public async Task The_score_stream_answers_each_message_in_order()
    {
        var client = new Scoring.ScoringClient(_server.Channel);
        using var call = client.ScoreStream();
        var ages = new[] { 20.0, 30, 40 };
        foreach (var age in ages)
        {
            var row = new Struct { Fields = { ["age"] = Value.ForNumber(age), ["lwt"] = Value.ForNumber(130), ["race"] = Value.ForString("white"), ["smoke"] = Value.ForNumber(0), ["ht"] = Value.ForNumber(0), ["ui"] = Value.ForNumber(0), ["ptl"] = Value.ForNumber(0) } };
            await call.RequestStream.WriteAsync(new ScoreRequest { Model = "birthwt", Rows = { row } });
        }

        await call.RequestStream.CompleteAsync();
        var etas = new List<double>();
        await foreach (var response in call.ResponseStream.ReadAllAsync())
        {
            etas.Add(response.Results[0].Eta);
        }

        Assert.Equal(3, etas.Count);
        Assert.True(etas[0] != etas[1] && etas[1] != etas[2]);
    }

    [Fact]
    public async Task A_bad_row_gets_its_error_naming_the_field_and_the_others_score()
    {
        var good = "{\"age\":25,\"lwt\":130,\"race\":\"white\",\"smoke\":0,\"ht\":0,\"ui\":0,\"ptl\":0}";
        var body = "{\"rows\":[" + good + ",{\"age\":\"old\",\"lwt\":130,\"race\":\"white\",\"smoke\":0,\"ht\":0,\"ui\":0,\"ptl\":0},"
            + "{\"age\":25,\"lwt\":130,\"race\":\"martian\",\"smoke\":0,\"ht\":0,\"ui\":0,\"ptl\":0},{\"age\":[1],\"lwt\":130},{\"lwt\":130}," + good + "],"
            + "\"keys\":[\"a\",\"b\",\"c\",\"d\",\"e\",\"f\"]}";
        var (status, json) = await PostAsync("/v1/models/birthwt/score", body);
        Assert.Equal(HttpStatusCode.OK, status);
        var r = json.RootElement.GetProperty("results").EnumerateArray().ToList();
        Assert.Equal(JsonValueKind.Null, r[0].GetProperty("error").ValueKind);
        Assert.Equal("age", r[1].GetProperty("error").GetProperty("field").GetString());
        Assert.Contains("expects a number", r[1].GetProperty("error").GetProperty("reason").GetString(), StringComparison.Ordinal);
        Assert.Equal("race", r[2].GetProperty("error").GetProperty("field").GetString());
        Assert.Equal("age", r[3].GetProperty("error").GetProperty("field").GetString());
        Assert.Equal("age", r[4].GetProperty("error").GetProperty("field").GetString());
        Assert.False(r[1].TryGetProperty("probability", out _));
        Assert.Equal(r[0].GetProperty("probability").GetDouble(), r[5].GetProperty("probability").GetDouble());
        Assert.Equal("f", r[5].GetProperty("key").GetString());
    }

    [Theory]
    [InlineData("/v1/models/birthwt/score", "{\"rows\":[{\"age\":25}", HttpStatusCode.BadRequest, null)]
    [InlineData("/v1/models/birthwt/score", "{\"rows\":5}", HttpStatusCode.BadRequest, null)]
    [InlineData("/v1/models/nope/score", "{\"rows\":[]}", HttpStatusCode.NotFound, "model")]
    [InlineData("/v1/models/birthwt/score", "{\"rows\":[], \"version\":\"v9\"}", HttpStatusCode.NotFound, "version")]
    [InlineData("/v1/models/birthwt/score", "{\"rows\":[{}], \"level\": 1.5}", HttpStatusCode.BadRequest, "level")]
    [InlineData("/v1/models/birthwt/score", "{\"rows\":[{}], \"keys\": [\"a\", \"b\"]}", HttpStatusCode.BadRequest, "keys")]
    [InlineData("/v1/models/birthwt/versions/r-logit/stage", "{\"stage\":\"gold\"}", HttpStatusCode.BadRequest, "stage")]
    public async Task Bad_requests_get_a_client_error_naming_the_field(string path, string body, HttpStatusCode expected, string? field)
    {
        var (status, json) = await PostAsync(path, body);
        Assert.Equal(expected, status);
        if (field is not null)
        {
            Assert.StartsWith(field + ":", json.RootElement.GetProperty("message").GetString(), StringComparison.Ordinal);
            var violation = json.RootElement.GetProperty("details")[0].GetProperty("fieldViolations")[0];
            Assert.Equal(field, violation.GetProperty("field").GetString());
        }
    }

    [Fact]
    public async Task Too_many_rows_is_refused_as_too_much_and_the_limit_is_named()
    {
        var rows = string.Join(",", Enumerable.Repeat("{}", 501));
        var (status, json) = await PostAsync("/v1/models/birthwt/score", "{\"rows\":[" + rows + "]}");
        Assert.Equal(HttpStatusCode.TooManyRequests, status);
        Assert.Contains("at most 500", json.RootElement.GetProperty("message").GetString(), StringComparison.Ordinal);
    }

    [Fact]
    public async Task Grpc_errors_carry_the_status_and_the_field()
    {
        var client = new Scoring.ScoringClient(_server.Channel);
        var ex = await Assert.ThrowsAsync<RpcException>(async () => await client.ScoreAsync(new ScoreRequest { Model = "nope" }));
        Assert.Equal(StatusCode.NotFound, ex.StatusCode);
        Assert.StartsWith("model:", ex.Status.Detail, StringComparison.Ordinal);
        var dense = new DenseScoreRequest { Model = "birthwt", Features = { "age", "weight" }, Values = { 1, 2 } };
        var ex2 = await Assert.ThrowsAsync<RpcException>(async () => await client.ScoreDenseAsync(dense));
        Assert.Equal(StatusCode.InvalidArgument, ex2.StatusCode);
        Assert.StartsWith("features[1]:", ex2.Status.Detail, StringComparison.Ordinal);
    }

    [Fact]
    public async Task Every_scored_row_reaches_the_prediction_log_with_its_key_and_features()
    {
        var (_, json) = await PostAsync("/v1/models/birthwt/score",
            "{\"rows\":[{\"age\":25,\"lwt\":130,\"race\":\"black\",\"smoke\":1,\"ht\":0,\"ui\":0,\"ptl\":0}],\"keys\":[\"case-17\"]}");
        var id = Guid.Parse(json.RootElement.GetProperty("results")[0].GetProperty("id").GetString()!);
        var store = _server.Service<Scorer.Store.IScorerStore>();
        Assert.True(await Files.EventuallyAsync(async () => await store.GetPredictionAsync(id) is not null, TimeSpan.FromSeconds(5)));
        var logged = (await store.GetPredictionAsync(id))!;
        Assert.Equal("case-17", logged.Key);
        Assert.Equal("r-logit", logged.Version);
        Assert.Equal(json.RootElement.GetProperty("results")[0].GetProperty("eta").GetDouble(), logged.Eta);
        using var features = JsonDocument.Parse(logged.FeaturesJson);
        Assert.Equal("black", features.RootElement.GetProperty("race").GetString());
        Assert.Equal(7, id.Version);
    }

    [Fact]
    public async Task Health_and_readiness_answer()
    {
        Assert.Equal(HttpStatusCode.OK, (await _server.Http.GetAsync("/healthz")).StatusCode);
        var ready = await _server.Http.GetAsync("/readyz");
        Assert.Equal(HttpStatusCode.OK, ready.StatusCode);
        var health = new Grpc.Health.V1.Health.HealthClient(_server.Channel);
        var reply = await health.CheckAsync(new Grpc.Health.V1.HealthCheckRequest());
        Assert.Equal(Grpc.Health.V1.HealthCheckResponse.Types.ServingStatus.Serving, reply.Status);
    }

    [Fact]
    public async Task The_OpenAPI_document_describes_the_rest_routes()
    {
        using var json = JsonDocument.Parse(await _server.Http.GetStringAsync("/swagger/v1/swagger.json"));
        var paths = json.RootElement.GetProperty("paths");
        Assert.True(paths.TryGetProperty("/v1/models/{model}/score", out var score));
        Assert.True(score.TryGetProperty("post", out _));
        Assert.True(paths.TryGetProperty("/v1/models", out _));
        Assert.True(paths.TryGetProperty("/v1/models/{model}/versions/{version}/stage", out _));
    }
}
