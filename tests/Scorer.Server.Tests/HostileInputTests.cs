using Scorer.Host;
using System.Net;
using System.Net.Sockets;
using System.Text;
using System.Text.Json;
using Google.Protobuf.WellKnownTypes;
using Grpc.Core;
using Scorer.Store;
using Scorer.Transport.V1;

namespace Scorer.Server.Tests;

/// <summary>
/// Hostile and careless input against the real server (Kestrel on loopback, SQLite): every one is a client error
/// naming the field, never a 500, never a silent change of meaning, never a stalled log. The pump model is the
/// invented demo scenario; the inputs are the point here, not its numbers.
/// </summary>
public sealed class HostileInputTests : IAsyncLifetime
{
    private const string Pump = "pump-bearing-failure";
    private const string Row = "{\"vibration_rms\":3.2,\"bearing_temp_c\":61,\"hours_since_service\":2500,\"site\":\"river\"}";

    private readonly TestFolder _folder = new();
    private RunningServer _server = null!;

    public async Task InitializeAsync()
    {
        _folder.AddModel(Files.Example("pump-bearings"), "pump.json");
        _server = await RunningServer.StartAsync(_folder, new Dictionary<string, string?>
        {
            ["Scorer:MaxRequestBodyBytes"] = "65536",
            ["Scorer:Limits:MaxEventSubscribers"] = "3",
        });
    }

    public async Task DisposeAsync()
    {
        await _server.DisposeAsync();
        _folder.Dispose();
    }

    private async Task<(HttpStatusCode Status, string Body)> SendAsync(HttpMethod method, string path, byte[]? body = null)
    {
        using var request = new HttpRequestMessage(method, path);
        if (body is not null)
        {
            request.Content = new ByteArrayContent(body);
            request.Content.Headers.ContentType = new System.Net.Http.Headers.MediaTypeHeaderValue("application/json");
        }

        using var response = await _server.Http.SendAsync(request);
        return (response.StatusCode, await response.Content.ReadAsStringAsync());
    }

    private Task<(HttpStatusCode Status, string Body)> PostAsync(string path, string body) => SendAsync(HttpMethod.Post, path, Encoding.UTF8.GetBytes(body));

    /// <summary>The field and reason of the one error shape.</summary>
    private static (string Field, string Reason) Violation(string body)
    {
        using var json = JsonDocument.Parse(body);
        var v = json.RootElement.GetProperty("details")[0].GetProperty("fieldViolations")[0];
        return (v.GetProperty("field").GetString()!, v.GetProperty("description").GetString()!);
    }

    private static void AssertRefused(HttpStatusCode expected, (HttpStatusCode Status, string Body) answer, string field, string reason)
    {
        Assert.True(expected == answer.Status, $"expected {expected}, got {answer.Status}: {answer.Body}");
        var (f, r) = Violation(answer.Body);
        Assert.Equal(field, f);
        Assert.Contains(reason, r, StringComparison.Ordinal);
    }

    private async Task<List<string>> ScoreIdsAsync(int rows)
    {
        var (status, body) = await PostAsync($"/v1/models/{Pump}/score", "{\"rows\":[" + string.Join(",", Enumerable.Repeat(Row, rows)) + "]}");
        Assert.Equal(HttpStatusCode.OK, status);
        using var json = JsonDocument.Parse(body);
        return [.. json.RootElement.GetProperty("results").EnumerateArray().Select(r => r.GetProperty("id").GetString()!)];
    }

    private async Task WaitLoggedAsync(IEnumerable<string> ids)
    {
        var store = _server.Service<IScorerStore>();
        foreach (var id in ids)
        {
            Assert.True(await Files.EventuallyAsync(async () => await store.GetPredictionAsync(Guid.Parse(id)) is not null, TimeSpan.FromSeconds(30)),
                $"prediction {id} was never logged");
        }
    }

    // ---- keys the store cannot hold (defect: one key stalled the PostgreSQL log) -------------------------------------

    [Fact]
    public async Task A_key_holding_U0000_is_refused_naming_it_on_every_scoring_path_and_the_log_goes_on()
    {
        AssertRefused(HttpStatusCode.BadRequest, await PostAsync($"/v1/models/{Pump}/score", "{\"rows\":[" + Row + "," + Row + "],\"keys\":[\"ok\",\"a\\u0000b\"]}"),
            "keys[1]", "U+0000");

        var scoring = new Scoring.ScoringClient(_server.Channel);
        var row = Struct.Parser.ParseJson(Row);
        var named = Assert.Throws<RpcException>(() => scoring.Score(new ScoreRequest { Model = Pump, Rows = { row }, Keys = { "a\0b" } }));
        Assert.Equal(StatusCode.InvalidArgument, named.StatusCode);
        Assert.StartsWith("keys[0]: holds the character U+0000", named.Status.Detail, StringComparison.Ordinal);

        var dense = Assert.Throws<RpcException>(() => scoring.ScoreDense(new DenseScoreRequest
        {
            Model = Pump, Features = { "vibration_rms", "bearing_temp_c", "hours_since_service" }, Values = { 3.2, 61, 2500 }, Keys = { "\0" },
        }));
        Assert.Equal(StatusCode.InvalidArgument, dense.StatusCode);
        Assert.StartsWith("keys[0]:", dense.Status.Detail, StringComparison.Ordinal);

        // Nothing of the refused calls was logged, and what comes after is.
        await WaitLoggedAsync(await ScoreIdsAsync(3));
        Assert.Equal(3, await _server.Service<IScorerStore>().CountPredictionsAsync(Pump));
    }

    // ---- outcomes whose absence would change meaning -----------------------------------------------------------------

    [Theory]
    [InlineData("{{\"outcomes\":[{{\"id\":\"{0}\"}}]}}")]
    [InlineData("{{\"outcomes\":[{{\"id\":\"{0}\",\"outcome\":null}}]}}")]
    public async Task An_outcome_entry_without_its_outcome_is_refused_naming_the_field_and_never_recorded_as_zero(string template)
    {
        var ids = await ScoreIdsAsync(1);
        await WaitLoggedAsync(ids);
        AssertRefused(HttpStatusCode.BadRequest, await PostAsync($"/v1/models/{Pump}/outcomes", string.Format(System.Globalization.CultureInfo.InvariantCulture, template, ids[0])),
            "outcomes[0].outcome", "missing");

        var outcomes = new Outcomes.OutcomesClient(_server.Channel);
        var error = Assert.Throws<RpcException>(() => outcomes.RecordOutcomes(new RecordOutcomesRequest { Model = Pump, Outcomes = { new OutcomeEntry { Id = ids[0] } } }));
        Assert.Equal(StatusCode.InvalidArgument, error.StatusCode);
        Assert.StartsWith("outcomes[0].outcome: missing", error.Status.Detail, StringComparison.Ordinal);
        Assert.Empty(await _server.Service<IScorerStore>().GetLabelledAsync(Pump, null, DateTimeOffset.UnixEpoch, DateTimeOffset.MaxValue));
    }

    public static TheoryData<string, string, string> BadOutcomeBodies() => new()
    {
        // body (an id is put in for {0}), the field named, a part of the reason
        { "{{\"outcomes\":[null]}}", "outcomes[0]", "null" },
        { "{{\"outcomes\":[{{\"id\":\"{0}\",\"outcom\":1}}]}}", "outcomes[0].outcom", "not a field of OutcomeEntry" },
        { "{{\"outcomes\":[{{\"id\":\"{0}\",\"outcome\":1}}],\"extra\":true}}", "extra", "not a field of RecordOutcomesRequest" },
        { "{{\"outcomes\":[{{\"id\":\"{0}\",\"outcome\":true}}]}}", "outcomes[0].outcome", "expected a whole number" },
        { "{{\"outcomes\":[{{\"id\":\"{0}\",\"outcome\":1.5}}]}}", "outcomes[0].outcome", "1.5 is not a whole number" },
        { "{{\"outcomes\":[{{\"id\":\"{0}\",\"outcome\":\"abc\"}}]}}", "outcomes[0].outcome", "abc is not a whole number" },
        { "{{\"outcomes\":[{{\"id\":\"{0}\",\"outcome\":1e400}}]}}", "outcomes[0].outcome", "out of range" },
        { "{{\"outcomes\":[{{\"id\":\"{0}\",\"outcome\":[1]}}]}}", "outcomes[0].outcome", "a list; expected a whole number" },
        { "{{\"outcomes\":[{{\"id\":12,\"outcome\":1}}]}}", "outcomes[0].id", "12; expected a string" },
        { "{{\"outcomes\":[{{\"id\":\" {0} \",\"outcome\":1}}]}}", "outcomes[0].id", "is not a prediction id" },
        { "{{\"outcomes\":[{{\"id\":\"{{{0}}}\",\"outcome\":1}}]}}", "outcomes[0].id", "is not a prediction id" },
        { "{{\"outcomes\":[{{\"key\":\"a\\u0000\",\"outcome\":1}}]}}", "outcomes[0].key", "U+0000" },
        { "{{\"outcomes\":[{{\"key\":\"\\ud800\",\"outcome\":1}}]}}", "outcomes[0].key", "not valid Unicode text" },
        { "{{\"outcomes\":[{{\"id\":\"{0}\",\"outcome\":1,\"outcome\":0}}]}}", "outcomes[0].outcome", "named twice" },
        { "{{\"outcomes\":{{\"id\":\"{0}\"}}}}", "outcomes", "an object; expected a list" },
        { "{{\"outcomes\":[{{\"id\":\"{0}\",\"outcome\":1,\"observedAt\":5}}]}}", "outcomes[0].observedAt", "expected a time in RFC 3339 form" },
        { "{{\"outcomes\":[{{\"id\":\"{0}\",\"outcome\":1,\"observedAt\":\"\u520B\"}}]}}", "outcomes[0].observedAt", "is not a time in RFC 3339 form" },
        { "{{\"outcomes\":[{{\"id\":\"{0}\",\"outcome\":5e-324}}]}}", "outcomes[0].outcome", "5e-324 is not a whole number" },
        { "{{\"outcomes\":[{{\"id\":\"{0}\",\"outcome\":1}}],\" \":1}}", "\" \"", "not a field of RecordOutcomesRequest" },
        { "{{\"outcomes\":[{{\"id\":\"{0}\",\"outcome\":1}}]", "body", "not well-formed JSON" },
    };

    [Theory]
    [MemberData(nameof(BadOutcomeBodies))]
    public async Task A_bad_outcome_entry_is_refused_naming_its_field_and_nothing_of_the_message_is_recorded(string template, string field, string reason)
    {
        var ids = await ScoreIdsAsync(1);
        await WaitLoggedAsync(ids);
        AssertRefused(HttpStatusCode.BadRequest, await PostAsync($"/v1/models/{Pump}/outcomes", string.Format(System.Globalization.CultureInfo.InvariantCulture, template, ids[0])),
            field, reason);
        Assert.Empty(await _server.Service<IScorerStore>().GetLabelledAsync(Pump, null, DateTimeOffset.UnixEpoch, DateTimeOffset.MaxValue));
    }

    [Fact]
    public async Task Invalid_UTF8_in_an_outcome_body_is_refused_naming_where()
    {
        var body = Encoding.UTF8.GetBytes("{\"outcomes\":[{\"key\":\"WO-\u00ff\",\"outcome\":1}]}");
        var bad = Array.IndexOf(body, (byte)0xC3);
        body[bad] = 0xFF; // a byte that is never UTF-8
        AssertRefused(HttpStatusCode.BadRequest, await SendAsync(HttpMethod.Post, $"/v1/models/{Pump}/outcomes", body), "outcomes[0].key", "not valid Unicode text");
    }

    [Fact]
    public async Task A_path_no_call_answers_is_404_naming_the_path_in_the_error_shape()
    {
        AssertRefused(HttpStatusCode.NotFound, await SendAsync(HttpMethod.Get, "/v1/models//history"), "path", "no call answers GET /v1/models//history");
    }

    [Fact]
    public async Task A_misspelt_query_parameter_is_refused_instead_of_falling_back_to_the_default()
    {
        AssertRefused(HttpStatusCode.BadRequest, await SendAsync(HttpMethod.Get, $"/v1/models/{Pump}/monitor?windw=30d"), "windw", "not a parameter of this call; parameters: version, window");
        Assert.Equal(HttpStatusCode.OK, (await SendAsync(HttpMethod.Get, $"/v1/models/{Pump}/monitor?window=30d")).Status);
    }

    [Fact]
    public async Task A_refused_third_message_of_the_outcome_stream_says_what_the_first_two_recorded()
    {
        var ids = await ScoreIdsAsync(3);
        await WaitLoggedAsync(ids);
        var outcomes = new Outcomes.OutcomesClient(_server.Channel);
        using var call = outcomes.RecordOutcomesStream();
        await call.RequestStream.WriteAsync(new RecordOutcomesRequest { Model = Pump, Outcomes = { new OutcomeEntry { Id = ids[0], Outcome = 1 } } });
        await call.RequestStream.WriteAsync(new RecordOutcomesRequest { Model = Pump, Outcomes = { new OutcomeEntry { Id = ids[1], Outcome = 0 } } });
        await call.RequestStream.WriteAsync(new RecordOutcomesRequest { Model = Pump, Outcomes = { new OutcomeEntry { Id = ids[2], Outcome = 7 } } });
        try
        {
            await call.RequestStream.CompleteAsync();
        }
        catch (RpcException)
        {
            // the server may have ended the call already
        }

        var error = await Assert.ThrowsAsync<RpcException>(async () => await call.ResponseAsync);
        Assert.Equal(StatusCode.InvalidArgument, error.StatusCode);
        Assert.Contains("outcomes[0].outcome: 7 is not an outcome", error.Status.Detail, StringComparison.Ordinal);
        Assert.Contains("the 2 before it were recorded (accepted 2, duplicates 0, unknown 0, conflicts 0)", error.Status.Detail, StringComparison.Ordinal);
        Assert.Equal(2, (await _server.Service<IScorerStore>().GetLabelledAsync(Pump, null, DateTimeOffset.UnixEpoch, DateTimeOffset.MaxValue)).Count);
    }

    // ---- malformed text and framing on the direct score reader --------------------------------------------------------

    public static TheoryData<string, string> BadTextInScoreBodies() => new()
    {
        // body with ¤ where a byte 0xFF (never UTF-8) goes, the field named
        { "{\"rows\":[],\"keys\":[\"k¤\"]}", "keys[0]" },
        { "{\"rows\":[],\"version\":\"v¤\"}", "version" },
        { "{\"rows\":[],\"model\":\"m¤\"}", "model" },
        { "{\"rows\":[],\"x¤\":1}", "body" },
        { "{\"rows\":[],\"keys\":[\"\\ud800\"]}", "keys[0]" },
        { "{\"rows\":[],\"version\":\"\\udfff\"}", "version" },
        { "{\"rows\":[],\"\\ud800\":1}", "body" },
    };

    [Theory]
    [MemberData(nameof(BadTextInScoreBodies))]
    public async Task Text_that_is_not_valid_unicode_in_a_score_body_is_a_client_error_naming_the_field(string template, string field)
    {
        var answer = await SendAsync(HttpMethod.Post, $"/v1/models/{Pump}/score", Bytes(template));
        AssertRefused(HttpStatusCode.BadRequest, answer, field, "not valid Unicode text");
    }

    [Theory]
    [InlineData("{\"rows\":[{\"vibration_rms\":3.2,\"bearing_temp_c\":61,\"hours_since_service\":2500,\"site\":\"riv¤\"}]}", "site", "the value is not valid Unicode text")]
    [InlineData("{\"rows\":[{\"vibration_rms\":3.2,\"bearing_temp_c\":61,\"hours_since_service\":2500,\"site\":\"\\ud800\"}]}", "site", "the value is not valid Unicode text")]
    [InlineData("{\"rows\":[{\"vibr¤\":3.2}]}", "rows[0]", "a field name is not valid Unicode text")]
    [InlineData("{\"rows\":[{\"\\udc00\":3.2}]}", "rows[0]", "a field name is not valid Unicode text")]
    public async Task Text_that_is_not_valid_unicode_in_a_row_fails_that_row_only(string template, string field, string reason)
    {
        var (status, body) = await SendAsync(HttpMethod.Post, $"/v1/models/{Pump}/score", Bytes(template.Replace("]}", "," + Row + "]}", StringComparison.Ordinal)));
        Assert.Equal(HttpStatusCode.OK, status);
        using var json = JsonDocument.Parse(body);
        var results = json.RootElement.GetProperty("results");
        Assert.Equal(field, results[0].GetProperty("error").GetProperty("field").GetString());
        Assert.Contains(reason, results[0].GetProperty("error").GetProperty("reason").GetString(), StringComparison.Ordinal);
        Assert.Equal(JsonValueKind.Null, results[1].GetProperty("error").ValueKind);
    }

    /// <summary>UTF-8 of the text with each ¤ replaced by the byte 0xFF.</summary>
    private static byte[] Bytes(string template) => [.. Encoding.UTF8.GetBytes(template.Replace('¤', '\u0001')).Select(b => b == 1 ? (byte)0xFF : b)];

    [Fact]
    public async Task A_chunked_score_body_whose_chunks_break_off_is_answered_400_once()
    {
        // The first chunk says 64 bytes and holds 20 before the next chunk header begins: the body breaks off there.
        var response = await RawAsync(
            $"POST /v1/models/{Pump}/score HTTP/1.1\r\nHost: x\r\nContent-Type: application/json\r\nTransfer-Encoding: chunked\r\n\r\n"
            + "10\r\n{\"rows\":[{\"vibration_rms\":3.2\r\n0\r\n\r\n", closeAfterSending: false);
        Assert.StartsWith("HTTP/1.1 400 ", response, StringComparison.Ordinal);
        Assert.Equal(1, CountResponses(response));
        Assert.Contains("\"code\":3", response, StringComparison.Ordinal);
    }

    [Fact]
    public async Task A_caller_that_goes_away_midway_through_a_chunked_body_costs_the_server_nothing()
    {
        var response = await RawAsync(
            $"POST /v1/models/{Pump}/score HTTP/1.1\r\nHost: x\r\nContent-Type: application/json\r\nTransfer-Encoding: chunked\r\n\r\n40\r\n{{\"rows\":[{{\"vibration_rms\":3.2",
            closeAfterSending: true);
        Assert.DoesNotContain("HTTP/1.1 5", response, StringComparison.Ordinal);
        Assert.True(CountResponses(response) <= 1);
        Assert.Equal(HttpStatusCode.OK, (await SendAsync(HttpMethod.Get, "/healthz")).Status);
        await WaitLoggedAsync(await ScoreIdsAsync(1));
    }

    [Fact]
    public async Task A_chunked_score_body_over_the_limit_is_answered_413_once()
    {
        var chunk = new string(' ', 8000);
        var request = new StringBuilder($"POST /v1/models/{Pump}/score HTTP/1.1\r\nHost: x\r\nContent-Type: application/json\r\nTransfer-Encoding: chunked\r\n\r\n");
        for (var i = 0; i < 10; i++) // 80,000 bytes against a limit of 65,536
        {
            request.Append(System.Globalization.CultureInfo.InvariantCulture, $"{chunk.Length:X}\r\n{chunk}\r\n");
        }

        request.Append("0\r\n\r\n");
        var response = await RawAsync(request.ToString(), closeAfterSending: false);
        Assert.StartsWith("HTTP/1.1 413 ", response, StringComparison.Ordinal);
        Assert.Equal(1, CountResponses(response));
        Assert.Contains("\"code\":8", response, StringComparison.Ordinal);
    }

    private static int CountResponses(string text) => System.Text.RegularExpressions.Regex.Matches(text, "HTTP/1\\.1 [0-9]{3} ").Count;

    /// <summary>Sends raw HTTP/1.1 and reads everything the server answers until it closes the connection or goes quiet.</summary>
    private async Task<string> RawAsync(string request, bool closeAfterSending)
    {
        using var client = new TcpClient();
        await client.ConnectAsync(_server.Http.BaseAddress!.Host, _server.Http.BaseAddress.Port);
        var stream = client.GetStream();
        await stream.WriteAsync(Encoding.ASCII.GetBytes(request));
        if (closeAfterSending)
        {
            client.Client.Shutdown(SocketShutdown.Send);
        }

        // Read the first answer whole (headers, then its Content-Length body), then see whether anything else follows.
        var received = new MemoryStream();
        var buffer = new byte[16384];
        using var deadline = new CancellationTokenSource(TimeSpan.FromSeconds(30));
        while (true)
        {
            var text = Encoding.ASCII.GetString(received.ToArray());
            var end = text.IndexOf("\r\n\r\n", StringComparison.Ordinal);
            if (end >= 0)
            {
                var length = System.Text.RegularExpressions.Regex.Match(text, "(?i)content-length: *([0-9]+)");
                if (length.Success && received.Length >= end + 4 + int.Parse(length.Groups[1].Value, System.Globalization.CultureInfo.InvariantCulture))
                {
                    break;
                }
            }

            int n;
            try
            {
                n = await stream.ReadAsync(buffer, deadline.Token);
            }
            catch (IOException e) when (e.InnerException is SocketException { SocketErrorCode: SocketError.ConnectionReset })
            {
                n = 0; // the server reset a connection whose caller went away: the exchange ends here, with what was sent
            }

            if (n == 0)
            {
                return Encoding.ASCII.GetString(received.ToArray());
            }

            received.Write(buffer, 0, n);
        }

        // Anything after the first answer arrives at once if it was sent with it (the corrupt exchange wrote a second).
        using var quiet = new CancellationTokenSource(TimeSpan.FromMilliseconds(500));
        try
        {
            while (await stream.ReadAsync(buffer, quiet.Token) is var n && n > 0)
            {
                received.Write(buffer, 0, n);
            }
        }
        catch (OperationCanceledException)
        {
        }
        catch (IOException)
        {
        }

        return Encoding.ASCII.GetString(received.ToArray());
    }

    // ---- wrong answers accepted silently ------------------------------------------------------------------------------

    [Fact]
    public void A_dense_message_naming_a_feature_twice_is_refused_naming_the_second()
    {
        var scoring = new Scoring.ScoringClient(_server.Channel);
        var error = Assert.Throws<RpcException>(() => scoring.ScoreDense(new DenseScoreRequest
        {
            Model = Pump,
            Features = { "vibration_rms", "bearing_temp_c", "hours_since_service", "site", "site" },
            Values = { 3.2, 61, 2500, 0, 1 },
        }));
        Assert.Equal(StatusCode.InvalidArgument, error.StatusCode);
        Assert.StartsWith("features[4]: 'site' is named twice (also features[3])", error.Status.Detail, StringComparison.Ordinal);
    }

    [Fact]
    public async Task An_error_repeats_at_most_a_short_part_of_a_huge_input()
    {
        var version = new string('v', 1_000_000);
        var (status, body) = await PostAsync($"/v1/models/{Pump}/score", "{\"rows\":[" + Row + "],\"version\":\"" + version[..60_000] + "\"}");
        Assert.Equal(HttpStatusCode.NotFound, status);
        Assert.InRange(body.Length, 1, 2_000);
        Assert.Contains("(60000 characters)", body, StringComparison.Ordinal);

        var scoring = new Scoring.ScoringClient(_server.Channel);
        var error = Assert.Throws<RpcException>(() => scoring.Score(new ScoreRequest { Model = Pump, Version = version[..60_000], Rows = { Struct.Parser.ParseJson(Row) } }));
        Assert.Equal(StatusCode.NotFound, error.StatusCode);
        Assert.InRange(error.Status.Detail.Length, 1, 2_000);
    }

    [Fact]
    public async Task The_log_keeps_only_the_features_the_model_uses_whatever_else_a_row_carries()
    {
        // 100 fields the model does not use, 200 characters each (each within Scorer:Limits:MaxStringLength).
        var ignored = string.Concat(Enumerable.Range(0, 100).Select(i => $"\"note{i}\":\"{new string('x', 200)}\","));
        var (status, body) = await PostAsync($"/v1/models/{Pump}/score",
            "{\"rows\":[{\"vibration_rms\":3.2,\"bearing_temp_c\":61," + ignored + "\"hours_since_service\":2500,\"site\":\"river\",\"extra\":true}]}");
        Assert.Equal(HttpStatusCode.OK, status);
        using var json = JsonDocument.Parse(body);
        var id = json.RootElement.GetProperty("results")[0].GetProperty("id").GetString()!;
        await WaitLoggedAsync([id]);
        var stored = await _server.Service<IScorerStore>().GetPredictionAsync(Guid.Parse(id));
        using var features = JsonDocument.Parse(stored!.FeaturesJson);
        Assert.Equal(["vibration_rms", "bearing_temp_c", "hours_since_service", "site"], features.RootElement.EnumerateObject().Select(p => p.Name));
        Assert.Equal("river", features.RootElement.GetProperty("site").GetString());
        Assert.Equal(3.2, features.RootElement.GetProperty("vibration_rms").GetDouble());
    }

    [Fact]
    public async Task A_recalibration_over_a_window_without_enough_outcomes_writes_nothing_and_says_how_many_it_has_and_needs()
    {
        var live = _server.Service<Scorer.Registry.ModelRegistry>().Current.Find(Pump)!.Live!.Version;
        var before = Directory.GetFiles(_folder.Models).Length;
        var answer = await PostAsync($"/v1/models/{Pump}/versions/{live}/recalibrate", "{\"kind\":\"in-the-large\",\"newVersion\":\"never\"}");
        AssertRefused(HttpStatusCode.BadRequest, answer, "window", "holds 0 labelled predictions");
        Assert.Contains("needs at least 50 of each", Violation(answer.Body).Reason, StringComparison.Ordinal);
        Assert.Equal(before, Directory.GetFiles(_folder.Models).Length);
    }

    [Fact]
    public async Task Event_streams_beyond_the_bound_are_refused_before_anything_is_sent()
    {
        var open = new List<HttpResponseMessage>();
        try
        {
            for (var i = 0; i < 3; i++)
            {
                var response = await _server.Http.GetAsync($"/v1/models/{Pump}/monitor/events", HttpCompletionOption.ResponseHeadersRead);
                Assert.Equal(HttpStatusCode.OK, response.StatusCode);
                open.Add(response);
            }

            using var refused = await _server.Http.GetAsync("/v1/overview/events", HttpCompletionOption.ResponseHeadersRead);
            AssertRefused(HttpStatusCode.TooManyRequests, (refused.StatusCode, await refused.Content.ReadAsStringAsync()), "subscribers", "3 event streams are open");

            var monitor = new Scorer.Transport.V1.Monitor.MonitorClient(_server.Channel);
            using var call = monitor.WatchReports(new MonitorRequest { Model = Pump });
            var error = await Assert.ThrowsAsync<RpcException>(() => call.ResponseStream.MoveNext());
            Assert.Equal(StatusCode.ResourceExhausted, error.StatusCode);
        }
        finally
        {
            foreach (var response in open)
            {
                response.Dispose();
            }
        }

        // Closed streams give their places back.
        var subscribers = _server.Service<Scorer.Application.EventSubscribers>();
        Assert.True(await Files.EventuallyAsync(() => Task.FromResult(subscribers.Open == 0), TimeSpan.FromSeconds(30)), $"{subscribers.Open} streams still open");
        using var again = await _server.Http.GetAsync($"/v1/models/{Pump}/monitor/events", HttpCompletionOption.ResponseHeadersRead);
        Assert.Equal(HttpStatusCode.OK, again.StatusCode);
    }

    [Fact]
    public async Task A_connection_string_given_as_the_SQLite_file_is_refused_with_a_message_and_no_file_is_made()
    {
        const string Connection = "Host=db.internal;Database=scorer;Username=scorer;Password=secret";
        var options = new ScorerOptions { Store = new StoreOptions { Path = Connection } };
        var problem = Assert.Single(options.Validate());
        Assert.Contains("looks like a PostgreSQL connection string", problem, StringComparison.Ordinal);
        Assert.Contains("--store-kind postgres --store-connection", problem, StringComparison.Ordinal);
        Assert.DoesNotContain("secret", problem, StringComparison.Ordinal);
        Assert.Empty(new ScorerOptions { Store = new StoreOptions { Path = Path.Combine("data", "a=b.db") } }.Validate());

        // The server refuses to start with it, and no SQLite file named after it appears.
        await Assert.ThrowsAsync<Microsoft.Extensions.Options.OptionsValidationException>(() =>
            ScorerServer.BuildAsync(["--models", _folder.Models, "--store", Connection, "--http", "127.0.0.1:0", "--grpc", "127.0.0.1:0"]));
        Assert.False(File.Exists(Connection));
        Assert.False(File.Exists(Path.Combine(AppContext.BaseDirectory, Connection)));
    }
}
