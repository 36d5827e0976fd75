using System.Globalization;
using System.Net;
using System.Text;
using System.Text.Json;
using Google.Protobuf;
using Google.Protobuf.WellKnownTypes;
using Grpc.Core;
using Scorer.Store;
using Scorer.Transport.V1;

namespace Scorer.Server.Tests;

/// <summary>
/// Seeded fuzz campaigns against the real server (Kestrel on loopback, SQLite): thousands of damaged, extreme and
/// hostile requests on every scoring and outcome path, REST and gRPC. The oracle is the contract, not a number: every
/// answer is a success of the documented shape or a client error of the one error shape naming a field, never a 500,
/// an <c>Unknown</c>/<c>Internal</c> status, a huge echo or a broken connection; every row the service accepted is in
/// the prediction log afterwards, and the service is still ready.
/// <para>
/// <c>SCORER_FUZZ_SEED</c> (default 20261201) picks the campaign, <c>SCORER_FUZZ_CASES</c> (default 600 per campaign)
/// its length, and <c>SCORER_FUZZ_CASE</c> replays one case of it: a failure names the seed and the case.
/// </para>
/// </summary>
public sealed class FuzzCampaignTests : IAsyncLifetime
{
    private const string Pump = "pump-bearing-failure";
    private const int MaxMessage = 1200; // the longest error message the contract allows (a cap of Errors)

    private static readonly int Seed = Setting("SCORER_FUZZ_SEED", 20261201);
    private static readonly int Cases = Setting("SCORER_FUZZ_CASES", 600);
    private static readonly int? OnlyCase = Environment.GetEnvironmentVariable("SCORER_FUZZ_CASE") is { Length: > 0 } c
        ? int.Parse(c, CultureInfo.InvariantCulture) : null;

    private readonly TestFolder _folder = new();
    private readonly HashSet<string> _accepted = [];
    private string _last = "", _lastAnswer = ""; // the request and answer of the case that runs, for the failure message
    private RunningServer _server = null!;

    public async Task InitializeAsync()
    {
        _folder.AddModel(Files.Example("pump-bearings"), "pump.json");
        _server = await RunningServer.StartAsync(_folder, new Dictionary<string, string?>
        {
            ["Scorer:MaxRequestBodyBytes"] = "262144",
            ["Scorer:Limits:MaxRows"] = "200",
        });
    }

    public async Task DisposeAsync()
    {
        await _server.DisposeAsync();
        _folder.Dispose();
    }

    private static int Setting(string name, int fallback) =>
        Environment.GetEnvironmentVariable(name) is { Length: > 0 } v ? int.Parse(v, CultureInfo.InvariantCulture) : fallback;

    /// <summary>Runs each case of a campaign with its own generator, so that one case replays alone.</summary>
    private async Task CampaignAsync(int campaign, Func<Random, int, Task> run)
    {
        for (var i = 0; i < Cases; i++)
        {
            if (OnlyCase is { } only && only != i)
            {
                continue;
            }

            var random = new Random(unchecked(((Seed * 31) + campaign) * 1_000_003 + i)); // not HashCode: it differs per process
            try
            {
                await run(random, i);
            }
            catch (Exception e) when (e is not OperationCanceledException)
            {
                throw new InvalidOperationException($"fuzz campaign {campaign}, SCORER_FUZZ_SEED={Seed} SCORER_FUZZ_CASE={i}: {e.Message}\nrequest: {Cut(_last)}\nanswer: {Cut(_lastAnswer)}", e);
            }
        }
    }

    // ---- what hostile input is made of ------------------------------------------------------------------------------

    private static readonly string[] Features = ["vibration_rms", "bearing_temp_c", "hours_since_service", "site"];

    private static readonly string[] HostileTexts =
    [
        "", " ", "north", "River", "\u0000", "a\u0000b", "\ud800", "\udfff x", "\u202e\u0645\u0636\u062e\u0629", "e\u0301", "\U0001F4A5",
        "NaN", "Infinity", "-Infinity", "1e400", "0x1F", "3,2", " 3.2", "3.2 ", "١٢", "null", "true", "[]", "{}", "\\", "\"", "'; --",
        "%00", "../../etc/passwd", "\r\n\r\nX: y",
    ];

    private static string Json(string text) => JsonSerializer.Serialize(text);

    private static string LongText(Random r) => new((char)r.Next('a', 'z' + 1), r.Next(1, 4) switch { 1 => 300, 2 => 5_000, _ => 60_000 });

    /// <summary>A JSON value of any kind, often at an edge.</summary>
    private static string AnyValue(Random r, int depth = 0) => r.Next(18) switch
    {
        0 => "0",
        1 => "-0",
        2 => "1e308",
        3 => "-1.7976931348623157e308",
        4 => "1e400",
        5 => "5e-324",
        6 => new string('9', r.Next(20, 800)),
        7 => "true",
        8 => "null",
        9 => Json(HostileTexts[r.Next(HostileTexts.Length)]),
        10 => Json(LongText(r)),
        11 => depth < 3 ? "[" + string.Join(",", Enumerable.Range(0, r.Next(4)).Select(_ => AnyValue(r, depth + 1))) + "]" : "[]",
        12 => depth < 3 ? "{" + string.Join(",", Enumerable.Range(0, r.Next(3)).Select(_ => $"{Json(AnyName(r))}:{AnyValue(r, depth + 1)}")) + "}" : "{}",
        13 => new string('[', r.Next(50, 3000)) + new string(']', r.Next(0, 3000)),
        14 => (r.NextDouble() * 20 - 5).ToString("R", CultureInfo.InvariantCulture),
        15 => r.Next(-100, 10_000).ToString(CultureInfo.InvariantCulture),
        16 => "\"" + new string('\\', r.Next(1, 5)) + "u00" + "\"",
        _ => Json(((char)r.Next(0, 0x10000)).ToString()),
    };

    private static string AnyName(Random r) => r.Next(8) switch
    {
        0 or 1 or 2 => Features[r.Next(Features.Length)],
        3 => Features[r.Next(Features.Length)].ToUpperInvariant(),
        4 => HostileTexts[r.Next(HostileTexts.Length)],
        5 => LongText(r),
        6 => "rows",
        _ => "x" + r.Next(1000).ToString(CultureInfo.InvariantCulture),
    };

    private static string GoodRow(Random r) =>
        $"{{\"vibration_rms\":{(0.7 + r.NextDouble() * 9).ToString("R", CultureInfo.InvariantCulture)},\"bearing_temp_c\":{r.Next(28, 84)}," +
        $"\"hours_since_service\":{r.Next(20, 7900)},\"site\":{Json(new[] { "north", "east", "river" }[r.Next(3)])}}}";

    /// <summary>A row: mostly good, with a few fields taken away, renamed, repeated or given hostile values.</summary>
    private static string HostileRow(Random r)
    {
        if (r.Next(10) == 0)
        {
            return AnyValue(r);
        }

        var fields = new List<string>();
        foreach (var name in Features)
        {
            var roll = r.Next(12);
            var value = roll switch
            {
                0 => AnyValue(r),
                1 => null, // left out
                _ => name == "site" ? Json(new[] { "north", "east", "river" }[r.Next(3)]) : (r.NextDouble() * 100).ToString("R", CultureInfo.InvariantCulture),
            };
            if (value is null)
            {
                continue;
            }

            fields.Add($"{Json(roll == 2 ? AnyName(r) : name)}:{value}");
            if (r.Next(20) == 0)
            {
                fields.Add($"{Json(name)}:{AnyValue(r)}"); // named twice
            }
        }

        return "{" + string.Join(",", fields.OrderBy(_ => r.Next())) + "}";
    }

    private static string ScoreBody(Random r)
    {
        var rows = r.Next(6) == 0 ? r.Next(0, 260) : r.Next(1, 5);
        var parts = new List<string> { "\"rows\":[" + string.Join(",", Enumerable.Range(0, rows).Select(_ => r.Next(3) == 0 ? HostileRow(r) : GoodRow(r))) + "]" };
        if (r.Next(4) == 0)
        {
            var keys = r.Next(5) == 0 ? rows + r.Next(-1, 2) : rows;
            parts.Add("\"keys\":[" + string.Join(",", Enumerable.Range(0, Math.Max(0, keys)).Select(k => r.Next(4) == 0 ? AnyValue(r) : Json($"K-{k}"))) + "]");
        }

        if (r.Next(5) == 0)
        {
            parts.Add("\"level\":" + (r.Next(2) == 0 ? AnyValue(r) : "0.9"));
        }

        if (r.Next(5) == 0)
        {
            parts.Add("\"contributions\":" + (r.Next(2) == 0 ? AnyValue(r) : r.Next(-2, 6).ToString(CultureInfo.InvariantCulture)));
        }

        if (r.Next(6) == 0)
        {
            parts.Add("\"version\":" + (r.Next(2) == 0 ? AnyValue(r) : Json("2026.11.1")));
        }

        if (r.Next(8) == 0)
        {
            parts.Add($"{Json(AnyName(r))}:{AnyValue(r)}");
        }

        return "{" + string.Join(",", parts.OrderBy(_ => r.Next())) + "}";
    }

    /// <summary>Damages a body's bytes: a flipped, dropped or inserted byte, a cut, a repeated slice.</summary>
    private static byte[] Damage(Random r, byte[] body)
    {
        var bytes = new List<byte>(body);
        for (var n = r.Next(1, 4); n > 0 && bytes.Count > 0; n--)
        {
            var at = r.Next(bytes.Count);
            switch (r.Next(5))
            {
                case 0: bytes[at] = (byte)r.Next(256); break;
                case 1: bytes.RemoveAt(at); break;
                case 2: bytes.Insert(at, (byte)r.Next(256)); break;
                case 3: bytes.RemoveRange(at, bytes.Count - at); break;
                default:
                    var length = Math.Min(r.Next(1, 64), bytes.Count - at);
                    bytes.InsertRange(at, bytes.GetRange(at, length));
                    break;
            }
        }

        return [.. bytes];
    }

    // ---- the oracle -----------------------------------------------------------------------------------------------------

    private async Task<(HttpStatusCode Status, string Body)> PostAsync(string path, byte[] body, string contentType = "application/json")
    {
        _last = $"POST {path} {Encoding.UTF8.GetString(body)}";
        using var request = new HttpRequestMessage(HttpMethod.Post, path) { Content = new ByteArrayContent(body) };
        request.Content.Headers.TryAddWithoutValidation("Content-Type", contentType);
        using var response = await _server.Http.SendAsync(request);
        foreach (var header in response.Headers.Concat(response.Content.Headers))
        {
            Assert.True(header.Value.Sum(v => v.Length) < 4096, $"header {header.Key} is {header.Value.Sum(v => v.Length)} characters");
        }

        _lastAnswer = await response.Content.ReadAsStringAsync();
        return (response.StatusCode, _lastAnswer);
    }

    /// <summary>A refusal in the one error shape: a code, a bounded message, and a field violation naming a field.</summary>
    private static void AssertErrorShape(HttpStatusCode status, string body)
    {
        // ResourceExhausted (too many rows) is HTTP 429 by the gRPC-to-HTTP mapping of JSON transcoding.
        Assert.True(status is HttpStatusCode.BadRequest or HttpStatusCode.NotFound or HttpStatusCode.RequestEntityTooLarge or HttpStatusCode.UnsupportedMediaType
                or HttpStatusCode.TooManyRequests,
            $"status {(int)status}: {Cut(body)}");
        Assert.True(body.StartsWith('{'), $"status {(int)status} with a body that is not the error shape: '{Cut(body)}'");
        using var json = JsonDocument.Parse(body);
        var message = json.RootElement.GetProperty("message").GetString()!;
        Assert.True(json.RootElement.GetProperty("details").GetArrayLength() > 0, $"no details: {Cut(body)}");
        Assert.True(message.Length <= MaxMessage, $"an error message of {message.Length} characters: {Cut(message)}");
        var violation = json.RootElement.GetProperty("details")[0].GetProperty("fieldViolations")[0];
        Assert.False(string.IsNullOrWhiteSpace(violation.GetProperty("field").GetString()), $"no field named: {Cut(body)}");
        Assert.False(string.IsNullOrWhiteSpace(violation.GetProperty("description").GetString()), $"no reason given: {Cut(body)}");
    }

    /// <summary>
    /// A refusal: the one error shape, except the two that Kestrel answers itself before the service sees the request
    /// (an empty body: a request target over its 8 KB limit; an encoded U+0000 in the path).
    /// </summary>
    private static void AssertRefusal(HttpStatusCode status, string body, string target)
    {
        if (body.Length == 0 && status is HttpStatusCode.RequestUriTooLong or HttpStatusCode.RequestHeaderFieldsTooLarge)
        {
            Assert.True(target.Length > 8000, $"{(int)status} for a {target.Length}-character target");
        }
        else if (body.Length == 0 && status == HttpStatusCode.BadRequest && target.Contains("%00", StringComparison.Ordinal))
        {
            return;
        }
        else
        {
            AssertErrorShape(status, body);
        }
    }

    private static string Cut(string text) => text.Length <= 400 ? text : text[..400] + "…";

    /// <summary>A score answer: an error in the one shape, or one result per row, each scored in range or refused with a code.</summary>
    private void CheckScoreAnswer(HttpStatusCode status, string body)
    {
        if (status != HttpStatusCode.OK)
        {
            AssertErrorShape(status, body);
            return;
        }

        using var json = JsonDocument.Parse(body);
        foreach (var result in json.RootElement.GetProperty("results").EnumerateArray())
        {
            if (result.TryGetProperty("probability", out var p))
            {
                var probability = p.GetDouble();
                Assert.InRange(probability, 0, 1);
                Assert.True(double.IsFinite(result.GetProperty("eta").GetDouble()));
                foreach (var number in result.EnumerateObject().Where(f => f.Name is "se" or "lower" or "upper" or "probabilitySe"))
                {
                    Assert.True(number.Value.ValueKind == JsonValueKind.Number && double.IsFinite(number.Value.GetDouble()), $"{number.Name} is {number.Value.GetRawText()}");
                }

                Assert.Equal(result.TryGetProperty("se", out _), result.TryGetProperty("lower", out _)); // a standard error comes with its band
                if (result.TryGetProperty("lower", out var lower))
                {
                    Assert.InRange(lower.GetDouble(), 0, probability);
                    Assert.InRange(result.GetProperty("upper").GetDouble(), probability, 1);
                }

                _accepted.Add(result.GetProperty("id").GetString()!);
            }
            else
            {
                var error = result.GetProperty("error");
                Assert.False(string.IsNullOrWhiteSpace(error.GetProperty("field").GetString()), $"a row error without its field: {Cut(result.GetRawText())}");
                Assert.True(error.GetProperty("reason").GetString()!.Length <= MaxMessage, $"a row error of {error.GetProperty("reason").GetString()!.Length} characters");
            }
        }
    }

    private static void CheckRpcError(RpcException e)
    {
        Assert.True(e.StatusCode is StatusCode.InvalidArgument or StatusCode.NotFound or StatusCode.ResourceExhausted or StatusCode.FailedPrecondition,
            $"status {e.StatusCode}: {Cut(e.Status.Detail)}");
        Assert.True(e.Status.Detail.Length <= MaxMessage, $"a status message of {e.Status.Detail.Length} characters");
        var status = e.GetRpcStatus();
        Assert.True(status is not null, $"{e.StatusCode} without the error details: {Cut(e.Status.Detail)}");
        var violation = status.GetDetail<Google.Rpc.BadRequest>()?.FieldViolations.FirstOrDefault();
        Assert.True(violation is not null && violation.Field.Length > 0, $"{e.StatusCode} names no field: {Cut(e.Status.Detail)}");
    }

    /// <summary>After a campaign: every accepted row is in the log, nothing was set aside, and the service is ready.</summary>
    private async Task AssertLogHeldEverythingAsync()
    {
        var store = _server.Service<IScorerStore>();
        var log = _server.Service<PredictionLog>();
        Assert.True(await Files.EventuallyAsync(() => Task.FromResult(log.Pending == 0), TimeSpan.FromSeconds(60)), $"the log still holds {log.Pending} rows");
        foreach (var id in _accepted)
        {
            Assert.True(await store.GetPredictionAsync(Guid.Parse(id)) is not null, $"accepted prediction {id} is not in the log");
        }

        Assert.Equal(0, log.SetAside);
        Assert.Equal(0, log.Dropped);
        Assert.Equal(0, log.FailedWrites);
        var ready = await _server.Http.GetAsync("/readyz");
        Assert.Equal(HttpStatusCode.OK, ready.StatusCode);
    }

    // ---- the campaigns -------------------------------------------------------------------------------------------------

    [Fact]
    public async Task Hostile_REST_score_bodies_get_a_result_per_row_or_an_error_naming_a_field_and_every_accepted_row_is_logged()
    {
        await CampaignAsync(1, async (r, _) =>
        {
            var body = Encoding.UTF8.GetBytes(ScoreBody(r));
            var (status, answer) = await PostAsync($"/v1/models/{Pump}/score", r.Next(3) == 0 ? Damage(r, body) : body);
            CheckScoreAnswer(status, answer);
        });
        Assert.True(OnlyCase is not null || _accepted.Count > Cases / 4, $"only {_accepted.Count} rows accepted in {Cases} cases");
        await AssertLogHeldEverythingAsync();
    }

    [Fact]
    public async Task Hostile_REST_outcome_bodies_and_paths_are_refused_naming_a_field_and_never_recorded_half()
    {
        var (_, scored) = await PostAsync($"/v1/models/{Pump}/score", Encoding.UTF8.GetBytes("{\"rows\":[" + GoodRow(new Random(1)) + "],\"keys\":[\"K-0\"]}"));
        var id = JsonDocument.Parse(scored).RootElement.GetProperty("results")[0].GetProperty("id").GetString()!;
        await CampaignAsync(2, async (r, _) =>
        {
            var entries = Enumerable.Range(0, r.Next(0, 4)).Select(_ => r.Next(4) switch
            {
                0 => $"{{\"id\":{Json(id)},\"outcome\":{AnyValue(r)}}}",
                1 => $"{{\"key\":{(r.Next(2) == 0 ? AnyValue(r) : Json("K-0"))},\"outcome\":{r.Next(0, 2)},\"observedAt\":{(r.Next(2) == 0 ? AnyValue(r) : Json("2026-12-01T10:00:00Z"))}}}",
                2 => $"{{{Json(AnyName(r))}:{AnyValue(r)},\"id\":{AnyValue(r)}}}",
                _ => AnyValue(r),
            });
            var text = "{\"outcomes\":[" + string.Join(",", entries) + "]}";
            var body = Encoding.UTF8.GetBytes(text);
            var model = r.Next(8) == 0 ? Uri.EscapeDataString(HostileTexts[r.Next(HostileTexts.Length)] + "m") : Pump;
            var (status, answer) = await PostAsync($"/v1/models/{model}/outcomes", r.Next(3) == 0 ? Damage(r, body) : body);
            if (status != HttpStatusCode.OK)
            {
                AssertRefusal(status, answer, model);
            }
            else
            {
                using var json = JsonDocument.Parse(answer);
                Assert.Equal(JsonValueKind.Object, json.RootElement.ValueKind);
            }

            // Whatever was sent, the one prediction has at most one outcome, 0 or 1.
            var labelled = await _server.Service<IScorerStore>().GetLabelledAsync(Pump, null, DateTimeOffset.UnixEpoch, DateTimeOffset.MaxValue);
            Assert.True(labelled.Count <= 1);
            Assert.All(labelled, l => Assert.InRange(l.Outcome, 0, 1));
        });
        await AssertLogHeldEverythingAsync();
    }

    [Fact]
    public async Task Hostile_gRPC_score_messages_get_results_or_an_error_naming_a_field()
    {
        var scoring = new Scoring.ScoringClient(_server.Channel);
        await CampaignAsync(3, async (r, _) =>
        {
            try
            {
                if (r.Next(2) == 0)
                {
                    var request = new ScoreRequest { Model = r.Next(10) == 0 ? AnyName(r) : Pump };
                    var rows = r.Next(6) == 0 ? r.Next(0, 260) : r.Next(1, 5);
                    for (var i = 0; i < rows; i++)
                    {
                        var row = r.Next(3) == 0 ? HostileRow(r) : GoodRow(r);
                        request.Rows.Add(row.StartsWith('{') ? Struct.Parser.ParseJson(SafeForProtobufJson(row)) : new Struct());
                    }

                    if (r.Next(4) == 0)
                    {
                        request.Keys.AddRange(Enumerable.Range(0, rows + (r.Next(5) == 0 ? 1 : 0)).Select(k => r.Next(4) == 0 ? AnyName(r) : $"K-{k}"));
                    }

                    if (r.Next(5) == 0)
                    {
                        request.Level = r.Next(3) switch { 0 => double.NaN, 1 => r.NextDouble() * 3 - 1, _ => 0.9 };
                    }

                    if (r.Next(5) == 0)
                    {
                        request.Contributions = r.Next(3) == 0 ? int.MinValue + r.Next(3) : r.Next(-2, 8);
                    }

                    if (r.Next(6) == 0)
                    {
                        request.Version = r.Next(2) == 0 ? AnyName(r) : "2026.11.1";
                    }

                    var response = await scoring.ScoreAsync(request);
                    Assert.Equal(rows, response.Results.Count);
                    foreach (var result in response.Results)
                    {
                        if (result.HasProbability)
                        {
                            Assert.InRange(result.Probability, 0, 1);
                            _accepted.Add(result.Id);
                        }
                        else
                        {
                            Assert.NotNull(result.Error);
                        }
                    }
                }
                else
                {
                    var features = Features.Take(3).Select(f => r.Next(8) == 0 ? AnyName(r) : f).ToList();
                    if (r.Next(10) == 0)
                    {
                        features.Add(features[0]);
                    }

                    var request = new DenseScoreRequest { Model = r.Next(10) == 0 ? AnyName(r) : Pump, Features = { features } };
                    var rows = r.Next(6) == 0 ? r.Next(0, 260) : r.Next(1, 5);
                    var values = rows * features.Count + (r.Next(10) == 0 ? r.Next(-2, 3) : 0);
                    for (var i = 0; i < Math.Max(0, values); i++)
                    {
                        request.Values.Add(r.Next(12) switch
                        {
                            0 => double.NaN,
                            1 => double.PositiveInfinity,
                            2 => double.MaxValue,
                            3 => -double.Epsilon,
                            4 => 0,
                            _ => 1 + r.NextDouble() * 50,
                        });
                    }

                    if (r.Next(4) == 0)
                    {
                        request.Keys.AddRange(Enumerable.Range(0, rows).Select(k => r.Next(4) == 0 ? AnyName(r) : $"D-{k}"));
                    }

                    if (r.Next(6) == 0)
                    {
                        request.Version = AnyName(r);
                    }

                    var response = await scoring.ScoreDenseAsync(request);
                    Assert.Equal(rows, response.Ids.Count);
                    var refused = response.Errors.Select(e => e.Row).ToHashSet();
                    for (var i = 0; i < rows; i++)
                    {
                        if (!refused.Contains(i))
                        {
                            Assert.InRange(response.Probability[i], 0, 1);
                            _accepted.Add(response.Ids[i]);
                        }
                    }
                }
            }
            catch (RpcException e)
            {
                CheckRpcError(e);
            }
        });
        await AssertLogHeldEverythingAsync();
    }

    /// <summary>Protobuf's JSON reader is the client's, not the server's: keep the hostile row to what a Struct can hold.</summary>
    private static string SafeForProtobufJson(string row)
    {
        try
        {
            Struct.Parser.ParseJson(row);
            return row;
        }
        catch (Exception e) when (e is InvalidProtocolBufferException or InvalidJsonException or FormatException)
        {
            return "{\"vibration_rms\":\"" + row.Length.ToString(CultureInfo.InvariantCulture) + "\"}";
        }
    }

    private static readonly Marshaller<byte[]> Raw = new(b => b, b => b);

    [Theory]
    [InlineData("Scoring", "Score")]
    [InlineData("Scoring", "ScoreDense")]
    [InlineData("Outcomes", "RecordOutcomes")]
    [InlineData("Monitor", "GetReport")]
    [InlineData("Models", "SetStage")]
    public async Task Damaged_gRPC_wire_bytes_are_refused_as_invalid_arguments_and_the_service_goes_on(string service, string method)
    {
        var call = new Method<byte[], byte[]>(MethodType.Unary, $"scorer.v1.{service}", method, Raw, Raw);
        var good = new ScoreRequest
        {
            Model = Pump, Keys = { "W-1" },
            Rows = { Struct.Parser.ParseJson("{\"vibration_rms\":3.2,\"bearing_temp_c\":61,\"hours_since_service\":2500,\"site\":\"river\"}") },
        }.ToByteArray();
        await CampaignAsync(4, async (r, _) =>
        {
            var bytes = r.Next(4) == 0 ? [.. Enumerable.Range(0, r.Next(1, 200)).Select(_ => (byte)r.Next(256))] : Damage(r, good);
            try
            {
                var answer = await _server.Channel.CreateCallInvoker().AsyncUnaryCall(call, null, new CallOptions(), bytes);
                if (method == "Score")
                {
                    foreach (var result in ScoreResponse.Parser.ParseFrom(answer).Results.Where(x => x.HasProbability))
                    {
                        _accepted.Add(result.Id);
                    }
                }
            }
            catch (RpcException e)
            {
                CheckRpcError(e);
            }
        });

        var scoring = new Scoring.ScoringClient(_server.Channel);
        var after = await scoring.ScoreAsync(ScoreRequest.Parser.ParseFrom(good));
        _accepted.Add(after.Results[0].Id);
        await AssertLogHeldEverythingAsync();
    }

    [Fact]
    public async Task A_gRPC_message_over_the_size_limit_is_refused_naming_the_body_in_unary_and_streaming_calls()
    {
        var big = new ScoreRequest { Model = Pump, Keys = { new string('k', 300_000) }, Rows = { new Struct() } };
        var scoring = new Scoring.ScoringClient(_server.Channel);
        var unary = await Assert.ThrowsAsync<RpcException>(async () => await scoring.ScoreAsync(big));
        CheckRpcError(unary);
        Assert.Equal(StatusCode.ResourceExhausted, unary.StatusCode);
        Assert.StartsWith("body: the request is larger than this server reads (Scorer:MaxRequestBodyBytes)", unary.Status.Detail, StringComparison.Ordinal);

        using var stream = scoring.ScoreStream();
        var streamed = await StreamStatusAsync(stream.RequestStream, stream.ResponseStream, big);
        CheckRpcError(streamed);
        Assert.StartsWith("body: message 1 of the stream is larger than this server reads", streamed.Status.Detail, StringComparison.Ordinal);

        var damaged = new Method<byte[], byte[]>(MethodType.DuplexStreaming, "scorer.v1.Scoring", "ScoreStream", Raw, Raw);
        using var raw = _server.Channel.CreateCallInvoker().AsyncDuplexStreamingCall(damaged, null, new CallOptions());
        var unreadable = await StreamStatusAsync(raw.RequestStream, raw.ResponseStream, [0x0A, 0xFF, 0xFF, 0xFF]); // a field 1 whose length runs past the end
        CheckRpcError(unreadable);
        Assert.StartsWith("body: message 1 of the stream is not a valid protobuf message of this call", unreadable.Status.Detail, StringComparison.Ordinal);
    }

    /// <summary>Sends one message on a stream and returns the status the call ended with (a write may fail once the server ended it).</summary>
    private static async Task<RpcException> StreamStatusAsync<TRequest, TResponse>(IClientStreamWriter<TRequest> requests, IAsyncStreamReader<TResponse> responses, TRequest message)
    {
        try
        {
            await requests.WriteAsync(message);
            await requests.CompleteAsync();
        }
        catch (RpcException)
        {
            // the server ended the call while the message was being sent; its status comes with the responses
        }
        catch (InvalidOperationException)
        {
            // the call is already complete
        }

        return await Assert.ThrowsAsync<RpcException>(async () =>
        {
            while (await responses.MoveNext(CancellationToken.None))
            {
            }
        });
    }

    [Fact]
    public async Task Hostile_query_strings_on_the_REST_reads_are_refused_naming_the_parameter()
    {
        string[] paths = ["/v1/models/{0}/monitor", "/v1/models/{0}/history", "/v1/models", "/v1/models/{0}/versions/{1}"];
        await CampaignAsync(5, async (r, _) =>
        {
            var path = string.Format(CultureInfo.InvariantCulture, paths[r.Next(paths.Length)],
                r.Next(4) == 0 ? Uri.EscapeDataString(AnyName(r)) : Pump, r.Next(3) == 0 ? Uri.EscapeDataString(AnyName(r)) : "2026.11.1");
            var query = string.Join("&", Enumerable.Range(0, r.Next(0, 4)).Select(_ => r.Next(3) switch
            {
                0 => "window=" + Uri.EscapeDataString(r.Next(2) == 0 ? AnyName(r) : new[] { "1d", "30d", "all", "-1d", "0d", "99999999999d" }[r.Next(6)]),
                1 => "version=" + Uri.EscapeDataString(AnyName(r)),
                _ => Uri.EscapeDataString(AnyName(r)) + "=" + Uri.EscapeDataString(AnyName(r)),
            }));
            _last = "GET " + path + (query.Length > 0 ? "?" + query : "");
            using var response = await _server.Http.GetAsync(path + (query.Length > 0 ? "?" + query : ""));
            var body = await response.Content.ReadAsStringAsync();
            if (response.StatusCode != HttpStatusCode.OK)
            {
                AssertRefusal(response.StatusCode, body, path + "?" + query);
            }
        });
        var ready = await _server.Http.GetAsync("/readyz");
        Assert.Equal(HttpStatusCode.OK, ready.StatusCode);
    }
}
