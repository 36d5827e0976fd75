using System.Globalization;
using System.Net;
using System.Text;
using System.Text.Json;
using Scorer.Store;

namespace Scorer.Server.Tests;

/// <summary>
/// The summarised report end to end: MASS's Pima.te (332 rows) scored with the model R fit on Pima.tr and labelled
/// with its real outcomes, with Scorer:Monitor:ExactRows at 200 so that the row cache cannot hold the window and the
/// report is merged from the stored summaries. Every statistic is checked against R, pROC, scikit-learn and statsmodels
/// on the same rows (tests/reference/calibration/out/pima-logit.json, as the exact report is in MonitorApiTests) within
/// the error budget of docs/monitoring.md "Summaries".
/// </summary>
public sealed class SummarisedReportTests : IAsyncLifetime
{
    private readonly TestFolder _folder = new();
    private RunningServer _server = null!;

    public async Task InitializeAsync()
    {
        _folder.AddModel(Files.Reference("pima-logit.model.json"), "pima.json");
        _server = await RunningServer.StartAsync(_folder, new Dictionary<string, string?>
        {
            ["Scorer:Monitor:ExactRows"] = "200",
            ["Scorer:Monitor:PollInterval"] = "00:00:00.050",
        });
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

    [Fact]
    public async Task A_window_larger_than_exact_rows_is_summarised_and_agrees_with_R_and_sklearn_within_the_error_budget()
    {
        var lines = File.ReadAllLines(Files.Reference("pima.rows.csv"));
        var header = lines[0].Split(',').Select(h => h.Trim('"')).ToArray();
        var rows = lines.Skip(1).Select(l => "{" + string.Join(",", l.Split(',').Select((v, i) => $"\"{header[i]}\":{v}")) + "}").ToList();
        var keys = string.Join(",", Enumerable.Range(0, rows.Count).Select(i => $"\"te-{i}\""));
        Assert.Equal(HttpStatusCode.OK, (await SendAsync(HttpMethod.Post, "/v1/models/pima/score", "{\"rows\":[" + string.Join(",", rows) + "],\"keys\":[" + keys + "]}")).Status);
        var store = _server.Service<IScorerStore>();
        Assert.True(await Files.EventuallyAsync(async () => await store.CountPredictionsAsync("pima") == rows.Count, TimeSpan.FromSeconds(10)));
        var y = File.ReadAllLines(Files.Reference("pima.outcomes.csv")).Skip(1).Select(int.Parse).ToList();
        var outcomes = "{\"outcomes\":[" + string.Join(",", y.Select((v, i) => $"{{\"key\":\"te-{i}\",\"outcome\":{v}}}")) + "]}";
        Assert.Equal(HttpStatusCode.OK, (await SendAsync(HttpMethod.Post, "/v1/models/pima/outcomes", outcomes)).Status);

        // The summaries' writer takes the outcomes in on its next rounds: wait for the summarised report to hold them all.
        JsonElement report = default;
        Assert.True(await Files.EventuallyAsync(async () =>
        {
            (_, report) = await SendAsync(HttpMethod.Get, "/v1/models/pima/monitor?window=all");
            return report.GetProperty("labelled").GetInt32() == rows.Count;
        }, TimeSpan.FromSeconds(20)));
        Assert.Equal("summarised", report.GetProperty("method").GetString());
        Assert.True(report.TryGetProperty("summarisedFrom", out _));

        using var expectedDoc = JsonDocument.Parse(File.ReadAllText(Scorer.Testing.TestRepository.CalibrationFile("pima-logit.json")));
        var e = expectedDoc.RootElement;
        Assert.Equal(e.GetProperty("events").GetDouble(), report.GetProperty("events").GetDouble());
        // Sums: exact (compared at the reference file's precision, 1e-9 relative).
        Relative(e, "brier", report.GetProperty("brier"), 1e-9);                           // sklearn brier_score_loss
        Relative(e, "log_loss", report.GetProperty("logLoss"), 1e-9);                      // sklearn log_loss
        Relative(e, "ece", report.GetProperty("ece"), 1e-9);                               // formula over sklearn's bins
        Relative(e, "oe", report.GetProperty("observedExpected").GetProperty("estimate"), 1e-9);
        Relative(e, "spiegelhalter_z", report.GetProperty("spiegelhalter").GetProperty("z"), 1e-9);
        var bins = report.GetProperty("reliability").EnumerateArray().ToList();
        var expectedBins = e.GetProperty("reliability").EnumerateArray().ToList();      // sklearn calibration_curve
        Assert.Equal(expectedBins.Count, bins.Count);
        for (var i = 0; i < bins.Count; i++)
        {
            Assert.Equal(expectedBins[i].GetProperty("count").GetInt32(), bins[i].GetProperty("count").GetInt32());
            Relative(expectedBins[i], "mean_predicted", bins[i].GetProperty("meanPredicted"), 1e-9);
        }

        // From the η bins: AUC within 1e-4 (sklearn roc_auc_score), its DeLong interval's half-width within 1% (pROC),
        // calibration intercept and slope within 1% of their standard errors (R glm).
        var auc = report.GetProperty("auc");
        Assert.True(Math.Abs(e.GetProperty("auc").GetDouble() - auc.GetProperty("estimate").GetDouble()) <= 1e-4, "auc");
        var halfWidth = (e.GetProperty("auc_upper").GetDouble() - e.GetProperty("auc_lower").GetDouble()) / 2;
        var seenHalfWidth = (auc.GetProperty("upper").GetDouble() - auc.GetProperty("lower").GetDouble()) / 2;
        Assert.True(Math.Abs(seenHalfWidth / halfWidth - 1) <= 0.01, $"DeLong half-width {seenHalfWidth:R} against pROC's {halfWidth:R}");
        foreach (var (name, field) in new[] { ("cal_intercept", "calibrationIntercept"), ("cal_slope", "calibrationSlope") })
        {
            var fitted = report.GetProperty(field);
            var se = e.GetProperty(name + "_se").GetDouble();
            var off = Math.Abs(e.GetProperty(name).GetDouble() - fitted.GetProperty("estimate").GetDouble()) / se;
            Assert.True(off <= 0.01, string.Create(CultureInfo.InvariantCulture, $"{name} is {off:P3} of its se from R's"));
            Assert.True(Math.Abs(fitted.GetProperty("se").GetDouble() / se - 1) <= 0.01, name + "_se");
        }

        // Hosmer–Lemeshow over whole-bin groups: R's 10 quantile groups (R quantile/cut, the reference's hl_table), each
        // boundary at the nearer edge of the η bin it falls in. On Pima.te one decile falls in a bin holding two rows, so
        // one row moves to the group below; every other group is R's, row for row. (One row of 332 moves the statistic
        // from 5.91 to 4.85: at this size the statistic is that sensitive to its grouping.)
        var hl = report.GetProperty("hosmerLemeshow");
        Assert.Equal(e.GetProperty("hl_df").GetInt32(), hl.GetProperty("df").GetInt32());
        var groups = hl.GetProperty("groups").EnumerateArray().ToList();
        var expectedGroups = e.GetProperty("hl_table").EnumerateArray().ToList();
        Assert.Equal(expectedGroups.Count, groups.Count);
        var moved = 0;
        for (var g = 0; g < groups.Count; g++)
        {
            var difference = groups[g].GetProperty("count").GetInt32() - expectedGroups[g].GetProperty("n").GetInt32();
            moved += Math.Abs(difference);
            if (difference == 0 && moved == 0)
            {
                Relative(expectedGroups[g], "expected", groups[g].GetProperty("expected"), 1e-9);
                Assert.Equal(expectedGroups[g].GetProperty("observed").GetInt32(), groups[g].GetProperty("observed").GetInt32());
            }
        }

        Assert.True(moved <= 2, $"{moved} rows changed groups");

        // The row cache stays within its bound (200 + a quarter; the 332 rows share one scoring time, so they went
        // together), and the summaries held are counted.
        var scrape = await _server.Http.GetStringAsync("/metrics");
        Assert.InRange(Metric(scrape, "scorer_memory_row_cache_rows"), 0, 250);
        Assert.True(Metric(scrape, "scorer_memory_bucket_documents") >= 1);
        Assert.True(Metric(scrape, "scorer_memory_bucket_bytes") > 541);
    }

    private static double Metric(string scrape, string name) =>
        double.Parse(scrape.Split('\n').Single(l => l.StartsWith(name + " ", StringComparison.Ordinal))[(name.Length + 1)..], CultureInfo.InvariantCulture);

    private static void Relative(JsonElement expected, string name, JsonElement actual, double tolerance)
    {
        var x = expected.GetProperty(name).GetDouble();
        var y = actual.GetDouble();
        Assert.True(Math.Abs(x - y) <= tolerance * Math.Max(1e-300, Math.Abs(x)), string.Create(CultureInfo.InvariantCulture, $"{name}: expected {x:R}, got {y:R}"));
    }
}
