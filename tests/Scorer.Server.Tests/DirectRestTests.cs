using System.Net;
using System.Net.Http.Headers;
using System.Text;
using System.Text.Json;
using System.Text.RegularExpressions;

namespace Scorer.Server.Tests;

/// <summary>
/// The direct REST reader of <c>POST /v1/models/{model}/score</c> against the generic gRPC JSON transcoder of the same
/// contract: two real servers over the same models, one with <c>Scorer:DirectRestScoring=false</c>.
/// </summary>
public sealed partial class DirectRestTests : IAsyncLifetime
{
    private readonly TestFolder _directFolder = new();
    private readonly TestFolder _transcodedFolder = new();
    private RunningServer _direct = null!;
    private RunningServer _transcoded = null!;

    public async Task InitializeAsync()
    {
        // Model files written by R from glm() on MASS::birthwt (tests/reference/scoring-reference.R), and the invented
        // pump model (it has a threshold, warnings for extrapolation and a categorical with unknown-level policy).
        foreach (var folder in new[] { _directFolder, _transcodedFolder })
        {
            folder.AddModel(Files.Reference("birthwt-logit.model.json"), "birthwt.json");
            folder.AddModel(Files.Reference("birthwt-probit.model.json"), "birthwt-probit.json");
            folder.AddModel(Files.Example("pump-bearings"), "pump.json");
        }

        var limits = new Dictionary<string, string?> { ["Scorer:Limits:MaxRows"] = "300", ["Scorer:Limits:MaxFeaturesPerRow"] = "20" };
        _direct = await RunningServer.StartAsync(_directFolder, limits);
        _transcoded = await RunningServer.StartAsync(_transcodedFolder, new Dictionary<string, string?>(limits) { ["Scorer:DirectRestScoring"] = "false" });
    }

    public async Task DisposeAsync()
    {
        await _direct.DisposeAsync();
        await _transcoded.DisposeAsync();
        _directFolder.Dispose();
        _transcodedFolder.Dispose();
    }

    private static string BirthwtRows()
    {
        var lines = File.ReadAllLines(Files.Reference("birthwt.rows.csv"));
        var header = lines[0].Split(',').Select(h => h.Trim('"')).ToArray();
        return string.Join(",", lines.Skip(1).Select(l => "{" + string.Join(",", l.Split(',').Select((v, i) =>
            header[i] == "race" ? $"\"{header[i]}\":\"{v.Trim('"')}\"" : $"\"{header[i]}\":{v.Trim('"')}")) + "}"));
    }

    private static async Task<(HttpStatusCode Status, string Body)> PostAsync(RunningServer server, string path, string body, string? key = null)
    {
        using var request = new HttpRequestMessage(HttpMethod.Post, path) { Content = new StringContent(body, Encoding.UTF8, "application/json") };
        if (key is not null)
        {
            request.Headers.Authorization = new AuthenticationHeaderValue("Bearer", key);
        }

        using var response = await server.Http.SendAsync(request);
        return (response.StatusCode, await response.Content.ReadAsStringAsync());
    }

    [GeneratedRegex("\"id\":\"[0-9a-f-]{36}\"")]
    private static partial Regex Ids();

    public static TheoryData<string, string> AcceptedRequests()
    {
        var rows = BirthwtRows();
        const string Pump = "{\"vibration_rms\":3.2,\"bearing_temp_c\":61,\"hours_since_service\":2500,\"site\":\"river\"}";
        return new TheoryData<string, string>
        {
            { "birthwt", "{\"rows\":[" + rows + "]}" },
            { "birthwt", "{\"rows\":[" + rows + "],\"level\":0.8,\"contributions\":3}" },
            { "birthwt", "{\"rows\":[" + rows + "],\"contributions\":-1,\"version\":\"r-logit\"}" },
            { "birthwt-probit", "{\"level\":0.99,\"rows\":[" + rows + "]}" },
            { "pump-bearing-failure", "{\"rows\":[" + Pump + "],\"keys\":[\"WO-1001\"]}" },
            // Extrapolation warnings, an unknown level, a string for a number, a list, a missing value, true for a number,
            // an infinite number, an escaped level name, a key too long, fields in another order, a feature the model lacks.
            { "pump-bearing-failure", "{\"rows\":[{\"vibration_rms\":0.01,\"bearing_temp_c\":161,\"hours_since_service\":99000,\"site\":\"river\"},"
                + "{\"vibration_rms\":3.2,\"bearing_temp_c\":61,\"hours_since_service\":2500,\"site\":\"mars\"},{\"vibration_rms\":\"x\"},{\"a\":[1]},"
                + "{\"vibration_rms\":null,\"bearing_temp_c\":61,\"hours_since_service\":2500,\"site\":\"river\"},{\"vibration_rms\":true},"
                + "{\"vibration_rms\":1e400},{\"site\":\"riv\\u0065r\",\"hours_since_service\":2500,\"bearing_temp_c\":61,\"vibration_rms\":3.2,\"note\":\"caf\\u00e9 <b>&'\"},"
                + Pump + "],\"keys\":[\"a\",\"b\",\"c\",\"d\",\"e\",\"f\",\"g\",\"h\",\"" + new string('k', 300) + "\"]}" },
            { "pump-bearing-failure", "{\"rows\":[],\"level\":null}" }, // (the transcoder refuses "keys": null; the direct reader takes null as absent, as proto3 JSON says)
            { "pump-bearing-failure", "{\"rows\":[" + Pump + "],\"level\":\"NaN\"}" },
            { "pump-bearing-failure", "{\"rows\":[" + Pump + "],\"level\":1.5}" },
            { "pump-bearing-failure", "{\"rows\":[" + Pump + "],\"keys\":[\"a\",\"b\"]}" },
            { "pump-bearing-failure", "{\"rows\":[" + Pump + "],\"version\":\"v0\"}" },
            { "no-such-model", "{\"rows\":[" + Pump + "]}" },
            { "pump-bearing-failure", "{\"rows\":[" + string.Join(",", Enumerable.Repeat(Pump, 301)) + "]}" },
            { "pump-bearing-failure", "{\"rows\":[{" + string.Join(",", Enumerable.Range(0, 21).Select(i => $"\"f{i}\":{i}")) + "}]}" },
        };
    }

    [Theory]
    [MemberData(nameof(AcceptedRequests))]
    public async Task The_direct_reader_answers_exactly_as_the_transcoder_does(string model, string body)
    {
        var path = $"/v1/models/{model}/score";
        var (directStatus, direct) = await PostAsync(_direct, path, body);
        var (transcodedStatus, transcoded) = await PostAsync(_transcoded, path, body);
        Assert.Equal(transcodedStatus, directStatus);

        // Ids are fresh per call; everything else, byte for byte.
        Assert.Equal(Ids().Replace(transcoded, "\"id\":\"*\""), Ids().Replace(direct, "\"id\":\"*\""));
    }

    [Theory]
    [InlineData("{\"rows\":[{\"age\":25}", "body", "line 1")]
    [InlineData("", "body", "empty")]
    [InlineData("[]", "body", "expected a JSON object, got a list")]
    [InlineData("{\"rows\":[]} trailing", "body", "not well-formed JSON")]
    [InlineData("{\"rows\":5}", "rows", "expected an array of row objects, got a number")]
    [InlineData("{\"rows\":[],\"levl\":0.9}", "levl", "not a field of a score request")]
    [InlineData("{\"rows\":[],\"keys\":[null]}", "keys[0]", "expected a string, got null")]
    [InlineData("{\"rows\":[],\"contributions\":1.5}", "contributions", "expected a whole number")]
    [InlineData("{\"rows\":[],\"level\":\"high\"}", "level", "'high' is not a number")]
    [InlineData("{\"rows\":[],\"model\":\"other\"}", "model", "the body names 'other'")]
    public async Task A_malformed_body_is_refused_naming_the_field_where_the_transcoder_says_only_that_it_is_malformed(string body, string field, string reason)
    {
        var (status, text) = await PostAsync(_direct, "/v1/models/birthwt/score", body);
        Assert.Equal(HttpStatusCode.BadRequest, status);
        using var json = JsonDocument.Parse(text);
        Assert.Equal(3, json.RootElement.GetProperty("code").GetInt32());
        var violation = json.RootElement.GetProperty("details")[0].GetProperty("fieldViolations")[0];
        Assert.Equal(field, violation.GetProperty("field").GetString());
        Assert.Contains(reason, violation.GetProperty("description").GetString(), StringComparison.Ordinal);

        var (transcodedStatus, _) = await PostAsync(_transcoded, "/v1/models/birthwt/score", body);
        Assert.True(transcodedStatus is HttpStatusCode.BadRequest or HttpStatusCode.OK); // the transcoder ignores unknown fields
    }

    [Fact]
    public async Task A_row_that_is_not_an_object_or_names_a_feature_twice_fails_alone()
    {
        const string Good = "{\"age\":25,\"lwt\":130,\"race\":\"white\",\"smoke\":0,\"ht\":0,\"ui\":0,\"ptl\":0}";
        var (status, text) = await PostAsync(_direct, "/v1/models/birthwt/score",
            "{\"rows\":[5," + Good + ",{\"age\":25,\"age\":26,\"lwt\":130,\"race\":\"white\",\"smoke\":0,\"ht\":0,\"ui\":0,\"ptl\":0},null]}");
        Assert.Equal(HttpStatusCode.OK, status);
        using var json = JsonDocument.Parse(text);
        var results = json.RootElement.GetProperty("results");
        Assert.Equal("rows[0]", results[0].GetProperty("error").GetProperty("field").GetString());
        Assert.Equal(JsonValueKind.Null, results[1].GetProperty("error").ValueKind);
        Assert.Equal("age", results[2].GetProperty("error").GetProperty("field").GetString());
        Assert.Contains("twice", results[2].GetProperty("error").GetProperty("reason").GetString(), StringComparison.Ordinal);
        Assert.Equal("rows[3]", results[3].GetProperty("error").GetProperty("field").GetString());

        // Each error carries its stable code, and the metric counts it under the same code.
        var codes = new[] { 0, 2, 3 }.Select(i => results[i].GetProperty("error").GetProperty("code").GetString()).ToList();
        Assert.Equal(["bad_value", "duplicate_feature", "bad_value"], codes);
        var metrics = await _direct.Http.GetStringAsync("/metrics");
        Assert.Contains("scorer_row_errors_total{model=\"birthwt\",kind=\"bad_value\"} 2", metrics, StringComparison.Ordinal);
        Assert.Contains("scorer_row_errors_total{model=\"birthwt\",kind=\"duplicate_feature\"} 1", metrics, StringComparison.Ordinal);
    }

    [Fact]
    public async Task A_body_that_is_not_declared_json_is_refused_naming_the_content_type()
    {
        using var content = new StringContent("{\"rows\":[]}", Encoding.UTF8, "text/plain");
        using var response = await _direct.Http.PostAsync("/v1/models/birthwt/score", content);
        Assert.Equal(HttpStatusCode.BadRequest, response.StatusCode);
        Assert.StartsWith("content-type:", JsonDocument.Parse(await response.Content.ReadAsStringAsync()).RootElement.GetProperty("message").GetString(),
            StringComparison.Ordinal);
    }

    [Fact]
    public async Task The_direct_reader_checks_api_keys_as_every_other_call_does()
    {
        using var folder = new TestFolder();
        folder.AddModel(Files.Reference("birthwt-logit.model.json"), "birthwt.json");
        await using var server = await RunningServer.StartAsync(folder, new Dictionary<string, string?>
        {
            ["Scorer:Keys:0:Name"] = "ops-dashboard",
            ["Scorer:Keys:0:Key"] = "score-key-0123456789",
            ["Scorer:Keys:0:Roles:0"] = "score",
            ["Scorer:Keys:1:Name"] = "labeller",
            ["Scorer:Keys:1:Key"] = "outcomes-key-0123456789",
            ["Scorer:Keys:1:Roles:0"] = "outcomes",
        });
        const string Body = "{\"rows\":[{\"age\":25,\"lwt\":130,\"race\":\"white\",\"smoke\":0,\"ht\":0,\"ui\":0,\"ptl\":0}]}";
        Assert.Equal(HttpStatusCode.Unauthorized, (await PostAsync(server, "/v1/models/birthwt/score", Body)).Status);
        Assert.Equal(HttpStatusCode.Unauthorized, (await PostAsync(server, "/v1/models/birthwt/score", Body, "wrong-key")).Status);
        Assert.Equal(HttpStatusCode.Forbidden, (await PostAsync(server, "/v1/models/birthwt/score", Body, "outcomes-key-0123456789")).Status);
        Assert.Equal(HttpStatusCode.OK, (await PostAsync(server, "/v1/models/birthwt/score", Body, "score-key-0123456789")).Status);
    }
}

/// <summary>The CSV result writer of the direct score endpoint (<c>Accept: text/csv</c>), checked against R.</summary>
public sealed class CsvScoreResponseTests : IAsyncLifetime
{
    private readonly TestFolder _folder = new();
    private RunningServer _server = null!;

    public async Task InitializeAsync()
    {
        _folder.AddModel(Files.Reference("birthwt-logit.model.json"), "birthwt.json");
        _server = await RunningServer.StartAsync(_folder);
    }

    public async Task DisposeAsync()
    {
        await _server.DisposeAsync();
        _folder.Dispose();
    }

    [Fact]
    public async Task Text_csv_gives_one_record_per_row_with_R_predict_values_and_a_failed_row_its_error_columns()
    {
        // Rows of MASS::birthwt and R's predict(type = "link", se.fit = TRUE) for them (tests/reference/scoring-reference.R).
        var lines = File.ReadAllLines(Files.Reference("birthwt.rows.csv"));
        var header = lines[0].Split(',').Select(h => h.Trim('"')).ToArray();
        var rows = lines.Skip(1).Select(l => "{" + string.Join(",", l.Split(',').Select((v, i) =>
            header[i] == "race" ? $"\"{header[i]}\":\"{v.Trim('"')}\"" : $"\"{header[i]}\":{v.Trim('"')}")) + "}").ToList();
        var body = "{\"rows\":[" + string.Join(",", rows) + ",{\"age\":\"old\"}],\"level\":0.95}";
        using var request = new HttpRequestMessage(HttpMethod.Post, "/v1/models/birthwt/score") { Content = new StringContent(body, Encoding.UTF8, "application/json") };
        request.Headers.Accept.ParseAdd("text/csv");
        using var response = await _server.Http.SendAsync(request);
        Assert.Equal(HttpStatusCode.OK, response.StatusCode);
        Assert.Equal("text/csv", response.Content.Headers.ContentType!.MediaType);
        Assert.Equal("r-logit", response.Headers.GetValues("X-Scorer-Version").Single());

        var reader = new Scorer.Tabular.CsvReader(new StringReader(await response.Content.ReadAsStringAsync()));
        var columns = new List<string>();
        Assert.True(reader.TryRead(columns));
        Assert.Equal(Scorer.Transport.Rest.RestScoring.CsvColumns, columns);
        var expected = File.ReadAllLines(Files.Reference("birthwt-logit.expected.csv")).Skip(1).Select(l => l.Split(',').Select(double.Parse).ToArray()).ToList();
        var record = new List<string>();
        for (var i = 0; i < rows.Count; i++)
        {
            Assert.True(reader.TryRead(record));
            Assert.Matches("^[0-9a-f-]{36}$", record[0]);
            Assert.Equal(expected[i][0], double.Parse(record[2], System.Globalization.CultureInfo.InvariantCulture), 1e-9); // eta
            Assert.Equal(expected[i][1], double.Parse(record[3], System.Globalization.CultureInfo.InvariantCulture), 1e-9); // se
            Assert.Equal(expected[i][2], double.Parse(record[4], System.Globalization.CultureInfo.InvariantCulture), 1e-9); // probability
            Assert.Equal(expected[i][3], double.Parse(record[5], System.Globalization.CultureInfo.InvariantCulture), 1e-9); // lower, 95%
            Assert.Equal(expected[i][4], double.Parse(record[6], System.Globalization.CultureInfo.InvariantCulture), 1e-9); // upper, 95%
            Assert.Equal("", record[10]);
        }

        Assert.True(reader.TryRead(record));
        Assert.Equal("", record[2]);
        Assert.Equal("expected_number", record[10]); // the code the JSON error carries
        Assert.Equal("age", record[11]);
        Assert.False(reader.TryRead(record));
    }
}
