using System.Globalization;
using System.Net;
using System.Text;
using System.Text.Json;
using Scorer.Store;

namespace Scorer.Server.Tests;

/// <summary>
/// Outcomes and the monitor end to end: MASS's Pima.te scored through REST with the model R fit on Pima.tr, its real
/// outcomes posted by key, the report read back and checked against R and scikit-learn on the same rows
/// (tests/reference/calibration, case pima-logit).
/// </summary>
public sealed class MonitorApiTests : IAsyncLifetime
{
    private readonly TestFolder _folder = new();
    private RunningServer _server = null!;

    public async Task InitializeAsync()
    {
        // Written by R's glm() on MASS::Pima.tr (tests/reference/scoring-reference.R).
        _folder.AddModel(Files.Reference("pima-logit.model.json"), "pima.json");
        _server = await RunningServer.StartAsync(_folder);
    }

    public async Task DisposeAsync()
    {
        await _server.DisposeAsync();
        _folder.Dispose();
    }

    private async Task<(HttpStatusCode Status, JsonElement Json)> SendAsync(HttpMethod method, string path, string? body = null)
    {
        using var request = new HttpRequestMessage(method, path);
        if (body is not null)
        {
            request.Content = new StringContent(body, Encoding.UTF8, "application/json");
        }

        using var response = await _server.Http.SendAsync(request);
        var text = await response.Content.ReadAsStringAsync();
        return (response.StatusCode, JsonDocument.Parse(text.Length == 0 ? "{}" : text).RootElement.Clone());
    }

    /// <summary>Scores Pima.te with keys te-0 … te-331 and waits until the log holds every row.</summary>
    private async Task<int> ScorePimaAsync()
    {
        var lines = File.ReadAllLines(Files.Reference("pima.rows.csv"));
        var header = lines[0].Split(',').Select(h => h.Trim('"')).ToArray();
        var rows = lines.Skip(1).Select(l => "{" + string.Join(",", l.Split(',').Select((v, i) => $"\"{header[i]}\":{v}")) + "}").ToList();
        var keys = string.Join(",", Enumerable.Range(0, rows.Count).Select(i => $"\"te-{i}\""));
        var (status, _) = await SendAsync(HttpMethod.Post, "/v1/models/pima/score", "{\"rows\":[" + string.Join(",", rows) + "],\"keys\":[" + keys + "]}");
        Assert.Equal(HttpStatusCode.OK, status);
        var store = _server.Service<IScorerStore>();
        Assert.True(await Files.EventuallyAsync(async () => await store.CountPredictionsAsync("pima") == rows.Count, TimeSpan.FromSeconds(10)));
        return rows.Count;
    }

    private static string PimaOutcomes(Func<int, int>? change = null)
    {
        var y = File.ReadAllLines(Files.Reference("pima.outcomes.csv")).Skip(1).Select(int.Parse).ToList();
        return "{\"outcomes\":[" + string.Join(",", y.Select((v, i) => $"{{\"key\":\"te-{i}\",\"outcome\":{(change is null ? v : change(i) is var c && c >= 0 ? c : v)}}}")) + "]}";
    }

    [Fact]
    public async Task The_monitor_report_over_posted_outcomes_agrees_with_R_and_sklearn_on_the_same_rows()
    {
        var n = await ScorePimaAsync();
        var (status, receipt) = await SendAsync(HttpMethod.Post, "/v1/models/pima/outcomes", PimaOutcomes());
        Assert.Equal(HttpStatusCode.OK, status);
        Assert.Equal(n, receipt.GetProperty("accepted").GetInt32());

        var (reportStatus, report) = await SendAsync(HttpMethod.Get, "/v1/models/pima/monitor?window=all");
        Assert.Equal(HttpStatusCode.OK, reportStatus);

        // Expected values: tests/reference/calibration/out/pima-logit.json (R glm, pROC, sklearn, statsmodels; see its README).
        using var expectedDoc = JsonDocument.Parse(File.ReadAllText(Scorer.Testing.TestRepository.CalibrationFile("pima-logit.json")));
        var e = expectedDoc.RootElement;
        Assert.Equal(e.GetProperty("n").GetInt32(), report.GetProperty("labelled").GetInt32());
        Assert.Equal(e.GetProperty("events").GetDouble(), report.GetProperty("events").GetDouble());
        Assert.Equal(0, report.GetProperty("immature").GetInt32());
        Assert.False(report.GetProperty("provisional").GetBoolean());
        Assert.Equal("exact", report.GetProperty("method").GetString()); // 332 rows, far below Scorer:Monitor:ExactRows
        Close(e, "brier", report.GetProperty("brier"));                         // sklearn brier_score_loss
        Close(e, "log_loss", report.GetProperty("logLoss"));                    // sklearn log_loss
        Close(e, "ece", report.GetProperty("ece"));                             // formula (Naeini et al. 2015) over sklearn's bins
        Close(e, "auc", report.GetProperty("auc").GetProperty("estimate"));     // sklearn roc_auc_score
        Close(e, "auc_lower", report.GetProperty("auc").GetProperty("lower"));  // pROC ci.auc, DeLong
        Close(e, "auc_upper", report.GetProperty("auc").GetProperty("upper"));
        Close(e, "oe", report.GetProperty("observedExpected").GetProperty("estimate"));
        Close(e, "oe_lower", report.GetProperty("observedExpected").GetProperty("lower"));
        Close(e, "oe_upper", report.GetProperty("observedExpected").GetProperty("upper"));
        Close(e, "cal_intercept", report.GetProperty("calibrationIntercept").GetProperty("estimate"));  // R glm with offset
        Close(e, "cal_intercept_se", report.GetProperty("calibrationIntercept").GetProperty("se"));
        Close(e, "cal_slope", report.GetProperty("calibrationSlope").GetProperty("estimate"));          // R glm on logit(p)
        Close(e, "cal_slope_se", report.GetProperty("calibrationSlope").GetProperty("se"));
        Close(e, "cal_slope_lower", report.GetProperty("calibrationSlope").GetProperty("lower"));
        Close(e, "cal_slope_upper", report.GetProperty("calibrationSlope").GetProperty("upper"));
        Close(e, "spiegelhalter_z", report.GetProperty("spiegelhalter").GetProperty("z"));              // Spiegelhalter (1986) formula
        Close(e, "spiegelhalter_p", report.GetProperty("spiegelhalter").GetProperty("p"));
        Close(e, "hl_statistic", report.GetProperty("hosmerLemeshow").GetProperty("statistic"));        // R quantile/cut grouping
        Assert.Equal(e.GetProperty("hl_df").GetInt32(), report.GetProperty("hosmerLemeshow").GetProperty("df").GetInt32());
        Close(e, "hl_p", report.GetProperty("hosmerLemeshow").GetProperty("p"));                        // R pchisq

        var bins = report.GetProperty("reliability").EnumerateArray().ToList();
        var expectedBins = e.GetProperty("reliability").EnumerateArray().ToList();   // sklearn calibration_curve, statsmodels Wilson
        Assert.Equal(expectedBins.Count, bins.Count);
        for (var i = 0; i < bins.Count; i++)
        {
            Assert.Equal(expectedBins[i].GetProperty("count").GetInt32(), bins[i].GetProperty("count").GetInt32());
            Assert.Equal(expectedBins[i].GetProperty("lower_edge").GetDouble(), bins[i].GetProperty("lower").GetDouble(), 1e-15);
            Assert.Equal(expectedBins[i].GetProperty("upper_edge").GetDouble(), bins[i].GetProperty("upper").GetDouble(), 1e-15);
            Close(expectedBins[i], "mean_predicted", bins[i].GetProperty("meanPredicted"));
            Close(expectedBins[i], "observed_rate", bins[i].GetProperty("observedRate"));
            Close(expectedBins[i], "wilson_lower", bins[i].GetProperty("observedLower"));
            Close(expectedBins[i], "wilson_upper", bins[i].GetProperty("observedUpper"));
        }

        // Calibration holds on Pima.te (slope 0.955, O/E 0.97, both intervals include 1; AUC 0.865).
        Assert.Equal("fine", report.GetProperty("status").GetString());
        Assert.Contains(report.GetProperty("reasons").EnumerateArray(), r => r.GetString()!.Contains("hold", StringComparison.Ordinal));
    }

    /// <summary>Within 1e-8 relative (the issue's tolerance for fitted quantities; sums agree far closer).</summary>
    private static void Close(JsonElement expected, string name, JsonElement actual)
    {
        var x = expected.GetProperty(name).GetDouble();
        var y = actual.GetDouble();
        Assert.True(Math.Abs(x - y) <= 1e-8 * Math.Max(1, Math.Abs(x)), string.Create(CultureInfo.InvariantCulture, $"{name}: expected {x:R}, got {y:R}"));
    }

    [Fact]
    public async Task Outcomes_are_idempotent_conflicts_are_reported_and_unknown_ids_are_listed()
    {
        var n = await ScorePimaAsync();
        await SendAsync(HttpMethod.Post, "/v1/models/pima/outcomes", PimaOutcomes());

        var (_, again) = await SendAsync(HttpMethod.Post, "/v1/models/pima/outcomes", PimaOutcomes());
        Assert.Equal(0, again.GetProperty("accepted").GetInt32());
        Assert.Equal(n, again.GetProperty("duplicates").GetInt32());

        var y0 = int.Parse(File.ReadAllLines(Files.Reference("pima.outcomes.csv"))[1], CultureInfo.InvariantCulture);
        var stranger = Guid.CreateVersion7().ToString();
        var (_, mixed) = await SendAsync(HttpMethod.Post, "/v1/models/pima/outcomes",
            $"{{\"outcomes\":[{{\"key\":\"te-0\",\"outcome\":{1 - y0}}},{{\"id\":\"{stranger}\",\"outcome\":1}}]}}");
        Assert.Equal(["te-0"], mixed.GetProperty("conflicts").EnumerateArray().Select(c => c.GetString()));
        Assert.Equal([stranger], mixed.GetProperty("unknown").EnumerateArray().Select(c => c.GetString()));

        // Kept first (the default policy): the report still counts the original outcome.
        var (_, report) = await SendAsync(HttpMethod.Get, "/v1/models/pima/monitor?window=all");
        Assert.Equal(n, report.GetProperty("labelled").GetInt32());
    }

    [Fact]
    public async Task Labelled_rows_export_as_csv_with_the_features_as_scored_and_the_outcomes_as_posted()
    {
        await ScorePimaAsync();
        await SendAsync(HttpMethod.Post, "/v1/models/pima/outcomes", PimaOutcomes());

        using var response = await _server.Http.GetAsync("/v1/models/pima/labelled");
        Assert.Equal(HttpStatusCode.OK, response.StatusCode);
        Assert.Equal("text/csv", response.Content.Headers.ContentType!.MediaType);
        var lines = (await response.Content.ReadAsStringAsync()).Split('\n', StringSplitOptions.RemoveEmptyEntries);
        var header = lines[0].Split(',');
        Assert.Equal(["prediction_id", "version", "stage", "scored_at", "key", "eta", "probability", "outcome", "implicit", "npreg", "glu", "bmi", "ped", "age"], header);

        // Row for row (by key) the values sent and the outcomes posted: MASS's Pima.te.
        var sent = File.ReadAllLines(Files.Reference("pima.rows.csv")).Skip(1).ToList();
        var y = File.ReadAllLines(Files.Reference("pima.outcomes.csv")).Skip(1).ToList();
        var rows = lines.Skip(1).Select(l => l.Split(',')).ToDictionary(f => f[4]);
        Assert.Equal(sent.Count, rows.Count);
        for (var i = 0; i < sent.Count; i++)
        {
            var row = rows[$"te-{i}"];
            Assert.Equal(y[i], row[7]);
            Assert.Equal(sent[i].Split(',').Select(v => double.Parse(v, CultureInfo.InvariantCulture)), row[9..].Select(v => double.Parse(v, CultureInfo.InvariantCulture)));
        }

        using var bad = await _server.Http.GetAsync("/v1/models/pima/labelled?since=yesterday");
        Assert.Equal(HttpStatusCode.BadRequest, bad.StatusCode);
        using var empty = await _server.Http.GetAsync("/v1/models/pima/labelled?until=2000-01-01T00:00:00Z");
        Assert.Single((await empty.Content.ReadAsStringAsync()).Split('\n', StringSplitOptions.RemoveEmptyEntries));
    }

    [Fact]
    public async Task A_recalibrated_candidate_is_fitted_as_R_fits_it_written_and_loaded_as_a_shadow_version()
    {
        await ScorePimaAsync();
        await SendAsync(HttpMethod.Post, "/v1/models/pima/outcomes", PimaOutcomes());
        var (_, models) = await SendAsync(HttpMethod.Get, "/v1/models");
        var live = models.GetProperty("models")[0].GetProperty("live").GetString()!;

        var (status, fit) = await SendAsync(HttpMethod.Post, $"/v1/models/pima/versions/{live}/recalibrate",
            "{\"window\":\"all\",\"kind\":\"intercept-and-slope\",\"newVersion\":\"recal-1\"}");
        Assert.Equal(HttpStatusCode.OK, status);
        Assert.True(fit.GetProperty("written").GetBoolean());

        // R: glm(y ~ qlogis(p), binomial) on Pima.te (tests/reference/calibration, pima-logit): for a logit model this is
        // the recalibration fit logit P(y) = a + b·eta.
        using var expectedDoc = JsonDocument.Parse(File.ReadAllText(Scorer.Testing.TestRepository.CalibrationFile("pima-logit.json")));
        Close(expectedDoc.RootElement, "cal_slope_intercept", fit.GetProperty("intercept").GetProperty("estimate"));
        Close(expectedDoc.RootElement, "cal_slope", fit.GetProperty("slope").GetProperty("estimate"));
        Close(expectedDoc.RootElement, "cal_slope_se", fit.GetProperty("slope").GetProperty("se"));

        // Loaded as a shadow version, scoring a + b·eta of the live version.
        var (_, after) = await SendAsync(HttpMethod.Get, "/v1/models");
        var versions = after.GetProperty("models")[0].GetProperty("versions").EnumerateArray().ToList();
        Assert.Contains(versions, v => v.GetProperty("version").GetString() == "recal-1" && v.GetProperty("stage").GetString() == "shadow");
        const string Row = "{\"npreg\":2,\"glu\":120,\"bmi\":31.5,\"ped\":0.4,\"age\":35}";
        var (_, old) = await SendAsync(HttpMethod.Post, "/v1/models/pima/score", "{\"rows\":[" + Row + "]}");
        var (_, fresh) = await SendAsync(HttpMethod.Post, "/v1/models/pima/score", "{\"rows\":[" + Row + "],\"version\":\"recal-1\"}");
        var a = fit.GetProperty("intercept").GetProperty("estimate").GetDouble();
        var b = fit.GetProperty("slope").GetProperty("estimate").GetDouble();
        var etaOld = old.GetProperty("results")[0].GetProperty("eta").GetDouble();
        Assert.Equal(a + (b * etaOld), fresh.GetProperty("results")[0].GetProperty("eta").GetDouble(), 1e-12);

        // The same name again is refused, naming the field.
        var (again, error) = await SendAsync(HttpMethod.Post, $"/v1/models/pima/versions/{live}/recalibrate", "{\"kind\":\"in-the-large\",\"newVersion\":\"recal-1\"}");
        Assert.Equal(HttpStatusCode.BadRequest, again);
        Assert.Equal("newVersion", error.GetProperty("details")[0].GetProperty("fieldViolations")[0].GetProperty("field").GetString());
    }

    [Fact]
    public async Task A_shadow_version_is_compared_with_the_live_one_on_the_same_labelled_rows()
    {
        // A first round of Pima.te gives the outcomes a recalibrated candidate is fitted on; it loads as shadow.
        await ScorePimaAsync();
        await SendAsync(HttpMethod.Post, "/v1/models/pima/outcomes", PimaOutcomes());
        var (_, models) = await SendAsync(HttpMethod.Get, "/v1/models");
        var live = models.GetProperty("models")[0].GetProperty("live").GetString()!;
        var (status, _) = await SendAsync(HttpMethod.Post, $"/v1/models/pima/versions/{live}/recalibrate",
            "{\"window\":\"all\",\"kind\":\"intercept-and-slope\",\"newVersion\":\"candidate\"}");
        Assert.Equal(HttpStatusCode.OK, status);

        // A second round of the same rows (keys round2-i) is scored by both; outcomes by id label the shadow rows too.
        var lines = File.ReadAllLines(Files.Reference("pima.rows.csv"));
        var header = lines[0].Split(',').Select(h => h.Trim('"')).ToArray();
        var rows = lines.Skip(1).Select(l => "{" + string.Join(",", l.Split(',').Select((v, i) => $"\"{header[i]}\":{v}")) + "}").ToList();
        var (_, scored) = await SendAsync(HttpMethod.Post, "/v1/models/pima/score", "{\"rows\":[" + string.Join(",", rows) + "]}");
        var ids = scored.GetProperty("results").EnumerateArray().Select(r => r.GetProperty("id").GetString()!).ToList();
        var store = _server.Service<IScorerStore>();
        Assert.True(await Files.EventuallyAsync(async () => await store.CountPredictionsAsync("pima", "candidate") == rows.Count, TimeSpan.FromSeconds(10)));
        var y = File.ReadAllLines(Files.Reference("pima.outcomes.csv")).Skip(1).ToList();
        var (_, receipt) = await SendAsync(HttpMethod.Post, "/v1/models/pima/outcomes",
            "{\"outcomes\":[" + string.Join(",", ids.Select((id, i) => $"{{\"id\":\"{id}\",\"outcome\":{y[i]}}}")) + "]}");
        Assert.Equal(rows.Count, receipt.GetProperty("accepted").GetInt32());

        var (_, report) = await SendAsync(HttpMethod.Get, "/v1/models/pima/monitor?window=all");
        var shadow = Assert.Single(report.GetProperty("shadows").EnumerateArray());
        Assert.Equal("candidate", shadow.GetProperty("version").GetString());
        Assert.Equal(rows.Count, shadow.GetProperty("paired").GetInt32());

        // The live side's mean log loss is sklearn's log_loss on Pima.te (tests/reference/calibration, pima-logit).
        using var expectedDoc = JsonDocument.Parse(File.ReadAllText(Scorer.Testing.TestRepository.CalibrationFile("pima-logit.json")));
        Close(expectedDoc.RootElement, "log_loss", shadow.GetProperty("logLoss").GetProperty("live"));

        // The candidate is the maximum-likelihood recalibration on these very outcomes, so its log loss cannot be higher;
        // a + b·eta with b > 0 keeps the ranking, so the paired AUC difference is exactly 0.
        Assert.True(shadow.GetProperty("logLoss").GetProperty("difference").GetDouble() >= 0);
        Assert.Equal(0, shadow.GetProperty("auc").GetProperty("difference").GetDouble());
        Assert.Contains(shadow.GetProperty("recommendation").GetString(), new[] { "promote", "undecided" });
        Assert.False(string.IsNullOrEmpty(shadow.GetProperty("reason").GetString()));
    }

    [Theory]
    [InlineData("{\"outcomes\":[{\"key\":\"te-0\",\"outcome\":2}]}", "outcomes[0].outcome")]
    [InlineData("{\"outcomes\":[{\"outcome\":1}]}", "outcomes[0]")]
    [InlineData("{\"outcomes\":[{\"id\":\"not-a-uuid\",\"outcome\":1}]}", "outcomes[0].id")]
    [InlineData("{\"outcomes\":[{\"id\":\"01a2343d-ca41-7b68-9cd2-67c04c990efb\",\"key\":\"k\",\"outcome\":1}]}", "outcomes[0]")]
    public async Task A_bad_outcome_refuses_the_message_naming_the_entry(string body, string field)
    {
        var (status, json) = await SendAsync(HttpMethod.Post, "/v1/models/pima/outcomes", body);
        Assert.Equal(HttpStatusCode.BadRequest, status);
        Assert.Equal(field, json.GetProperty("details")[0].GetProperty("fieldViolations")[0].GetProperty("field").GetString());
    }

    [Theory]
    [InlineData("/v1/models/nope/monitor", HttpStatusCode.NotFound, "model")]
    [InlineData("/v1/models/pima/monitor?version=v9", HttpStatusCode.NotFound, "version")]
    [InlineData("/v1/models/pima/monitor?window=fortnight", HttpStatusCode.BadRequest, "window")]
    public async Task A_bad_monitor_request_names_the_field(string path, HttpStatusCode expected, string field)
    {
        var (status, json) = await SendAsync(HttpMethod.Get, path);
        Assert.Equal(expected, status);
        Assert.Equal(field, json.GetProperty("details")[0].GetProperty("fieldViolations")[0].GetProperty("field").GetString());
    }

    [Fact]
    public async Task Before_any_outcome_every_scored_prediction_is_immature_and_the_window_provisional()
    {
        var n = await ScorePimaAsync();
        var (_, report) = await SendAsync(HttpMethod.Get, "/v1/models/pima/monitor?window=24h");
        Assert.Equal(0, report.GetProperty("labelled").GetInt32());
        Assert.Equal(n, report.GetProperty("immature").GetInt32());
        Assert.True(report.GetProperty("provisional").GetBoolean());
        Assert.Equal("fine", report.GetProperty("status").GetString());
        Assert.Contains(report.GetProperty("reasons").EnumerateArray(), r => r.GetString()!.StartsWith("Too few outcomes", StringComparison.Ordinal));
    }
}

/// <summary>Outcomes over gRPC, and the roles the outcome and monitor calls need.</summary>
public sealed class OutcomesGrpcTests : IAsyncLifetime
{
    private readonly TestFolder _folder = new();
    private RunningServer _server = null!;

    public async Task InitializeAsync()
    {
        _folder.AddModel(Files.Reference("pima-logit.model.json"), "pima.json");
        _server = await RunningServer.StartAsync(_folder, new Dictionary<string, string?>
        {
            ["Scorer:Keys:0:Name"] = "scoring-system",
            ["Scorer:Keys:0:Key"] = "score-key-0123456789",
            ["Scorer:Keys:0:Roles:0"] = "score",
            ["Scorer:Keys:1:Name"] = "labelling-system",
            ["Scorer:Keys:1:Key"] = "outcomes-key-0123456789",
            ["Scorer:Keys:1:Roles:0"] = "outcomes",
        });
    }

    public async Task DisposeAsync()
    {
        await _server.DisposeAsync();
        _folder.Dispose();
    }

    private static Grpc.Core.Metadata Bearer(string key) => new() { { "authorization", "Bearer " + key } };

    [Fact]
    public async Task A_client_stream_of_outcome_messages_gets_one_answer_counting_them_all()
    {
        var scoring = new Scorer.Transport.V1.Scoring.ScoringClient(_server.Channel);
        var request = new Scorer.Transport.V1.ScoreRequest { Model = "pima" };
        for (var i = 0; i < 4; i++)
        {
            request.Rows.Add(Google.Protobuf.WellKnownTypes.Struct.Parser.ParseJson($"{{\"npreg\":{i},\"glu\":120,\"bmi\":31.5,\"ped\":0.4,\"age\":35}}"));
        }

        var scored = await scoring.ScoreAsync(request, Bearer("score-key-0123456789"));
        var store = _server.Service<IScorerStore>();
        Assert.True(await Files.EventuallyAsync(async () => await store.CountPredictionsAsync("pima") == 4, TimeSpan.FromSeconds(10)));

        var outcomes = new Scorer.Transport.V1.Outcomes.OutcomesClient(_server.Channel);
        using var call = outcomes.RecordOutcomesStream(Bearer("outcomes-key-0123456789"));
        foreach (var pair in scored.Results.Chunk(2))
        {
            var message = new Scorer.Transport.V1.RecordOutcomesRequest { Model = "pima" };
            message.Outcomes.AddRange(pair.Select((r, i) => new Scorer.Transport.V1.OutcomeEntry { Id = r.Id, Outcome = i }));
            await call.RequestStream.WriteAsync(message);
        }

        await call.RequestStream.CompleteAsync();
        var answer = await call;
        Assert.Equal(4, answer.Accepted);
        Assert.Equal(4, (await store.GetLabelledAsync("pima", null, DateTimeOffset.UnixEpoch, DateTimeOffset.UtcNow.AddHours(1))).Count);
    }

    [Fact]
    public async Task Outcomes_need_the_outcomes_role_and_reports_the_score_role()
    {
        var outcomes = new Scorer.Transport.V1.Outcomes.OutcomesClient(_server.Channel);
        var message = new Scorer.Transport.V1.RecordOutcomesRequest { Model = "pima", Outcomes = { new Scorer.Transport.V1.OutcomeEntry { Key = "k", Outcome = 1 } } };
        var refused = await Assert.ThrowsAsync<Grpc.Core.RpcException>(async () => await outcomes.RecordOutcomesAsync(message, Bearer("score-key-0123456789")));
        Assert.Equal(Grpc.Core.StatusCode.PermissionDenied, refused.StatusCode);
        Assert.Equal(["k"], (await outcomes.RecordOutcomesAsync(message, Bearer("outcomes-key-0123456789"))).Unknown);

        var monitor = new Scorer.Transport.V1.Monitor.MonitorClient(_server.Channel);
        var unauthenticated = await Assert.ThrowsAsync<Grpc.Core.RpcException>(async () =>
            await monitor.GetReportAsync(new Scorer.Transport.V1.MonitorRequest { Model = "pima" }));
        Assert.Equal(Grpc.Core.StatusCode.Unauthenticated, unauthenticated.StatusCode);
        var report = await monitor.GetReportAsync(new Scorer.Transport.V1.MonitorRequest { Model = "pima" }, Bearer("score-key-0123456789"));
        Assert.Equal("7d", report.Window);

        // The export of labelled rows is for admins only.
        using var export = new HttpRequestMessage(HttpMethod.Get, "/v1/models/pima/labelled");
        export.Headers.Authorization = new System.Net.Http.Headers.AuthenticationHeaderValue("Bearer", "score-key-0123456789");
        using var response = await _server.Http.SendAsync(export);
        Assert.Equal(HttpStatusCode.Forbidden, response.StatusCode);
    }
}

/// <summary>A recalibration over a window holding more than Scorer:Monitor:RecalibrationRows is fitted on its latest rows.</summary>
public sealed class RecalibrationBoundTests : IAsyncLifetime
{
    private readonly TestFolder _folder = new();
    private RunningServer _server = null!;

    public async Task InitializeAsync()
    {
        _folder.AddModel(Files.Reference("pima-logit.model.json"), "pima.json");
        _server = await RunningServer.StartAsync(_folder, new Dictionary<string, string?>
        {
            ["Scorer:Monitor:RecalibrationRows"] = "100",
            ["Scorer:Monitor:MinEvents"] = "20",
            ["Scorer:Monitor:ChartPageRows"] = "30",
        });
    }

    public async Task DisposeAsync()
    {
        await _server.DisposeAsync();
        _folder.Dispose();
    }

    [Fact]
    public async Task The_fit_uses_the_latest_rows_of_the_window_read_in_pages()
    {
        // MASS's Pima.te, 332 rows scored one request at a time in file order (so prediction time follows the file), all labelled.
        var lines = File.ReadAllLines(Files.Reference("pima.rows.csv"));
        var header = lines[0].Split(',').Select(h => h.Trim('"')).ToArray();
        var rows = lines.Skip(1).Select(l => "{" + string.Join(",", l.Split(',').Select((v, i) => $"\"{header[i]}\":{v}")) + "}").ToList();
        var y = File.ReadAllLines(Files.Reference("pima.outcomes.csv")).Skip(1).Select(int.Parse).ToList();
        for (var i = 0; i < rows.Count; i++)
        {
            using var content = new StringContent("{\"rows\":[" + rows[i] + "],\"keys\":[\"te-" + i + "\"]}", System.Text.Encoding.UTF8, "application/json");
            using var response = await _server.Http.PostAsync("/v1/models/pima/score", content);
            Assert.Equal(HttpStatusCode.OK, response.StatusCode);
        }

        var store = _server.Service<IScorerStore>();
        Assert.True(await Files.EventuallyAsync(async () => await store.CountPredictionsAsync("pima") == rows.Count, TimeSpan.FromSeconds(20)));
        using (var outcomes = new StringContent("{\"outcomes\":[" + string.Join(",", y.Select((v, i) => $"{{\"key\":\"te-{i}\",\"outcome\":{v}}}")) + "]}",
            System.Text.Encoding.UTF8, "application/json"))
        {
            Assert.Equal(HttpStatusCode.OK, (await _server.Http.PostAsync("/v1/models/pima/outcomes", outcomes)).StatusCode);
        }

        var live = JsonDocument.Parse(await _server.Http.GetStringAsync("/v1/models")).RootElement.GetProperty("models")[0].GetProperty("live").GetString();
        using var body = new StringContent("{\"window\":\"all\",\"kind\":\"in-the-large\",\"newVersion\":\"latest-100\"}", System.Text.Encoding.UTF8, "application/json");
        using var answer = await _server.Http.PostAsync($"/v1/models/pima/versions/{live}/recalibrate", body);
        var text = await answer.Content.ReadAsStringAsync();
        Assert.True(answer.StatusCode == HttpStatusCode.OK, text);
        var fit = JsonDocument.Parse(text).RootElement;

        // The last 100 rows of Pima.te, across four pages of 30 and a ring of 100 that wrapped twice.
        Assert.Equal(100, fit.GetProperty("rows").GetInt32());
        Assert.Equal(y.Skip(232).Sum(), fit.GetProperty("events").GetInt32());
    }
}
