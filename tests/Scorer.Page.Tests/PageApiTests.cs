using System.Net;
using System.Net.Http.Headers;
using System.Text.Json;
using Scorer.Statistics;
using Scorer.Store;

namespace Scorer.Page.Tests;

/// <summary>The JSON the page reads beside the monitor API: the trend, the CUSUM paths and the overview (docs/page.md).</summary>
[Collection("browser")]
public sealed class PageApiTests : IAsyncLifetime
{
    private PageServer _server = null!;

    public async Task InitializeAsync()
    {
        _server = await PageServer.StartAsync(keys: true);
        var scored = await _server.ScorePumpsAsync(1500, seed: 21);
        await _server.PostOutcomesAsync(scored, oddsRatio: 2, seed: 22);
    }

    public async Task DisposeAsync() => await _server.DisposeAsync();

    [Fact]
    public async Task The_trend_buckets_hold_every_labelled_prediction_and_each_bucket_is_computed_over_its_own_rows()
    {
        var report = await _server.GetJsonAsync($"v1/models/{PageServer.Pumps}/monitor?window=all");
        var trend = await _server.GetJsonAsync($"v1/models/{PageServer.Pumps}/monitor/trend?window=all&buckets=40");
        var buckets = trend.GetProperty("buckets").EnumerateArray().ToList();
        Assert.InRange(buckets.Count, 1, 40);
        Assert.Equal(report.GetProperty("labelled").GetInt64(), buckets.Sum(b => b.GetProperty("labelled").GetInt64()));
        Assert.Equal(report.GetProperty("events").GetInt64(), buckets.Sum(b => b.GetProperty("events").GetInt64()));
        var step = TimeSpan.FromSeconds(trend.GetProperty("stepSeconds").GetDouble());
        Assert.Equal(0, DateTimeOffset.Parse(buckets[0].GetProperty("from").GetString()!, System.Globalization.CultureInfo.InvariantCulture).ToUnixTimeMilliseconds() % (long)step.TotalMilliseconds);

        // Each bucket's statistics are the library's over that bucket's labelled predictions (the library itself is
        // checked against R and scikit-learn in tests/Scorer.Monitor.Tests).
        var store = _server.Service<IScorerStore>();
        var estimated = 0;
        foreach (var bucket in buckets.Where(b => b.GetProperty("labelled").GetInt64() > 0))
        {
            var from = bucket.GetProperty("from").GetDateTimeOffset();
            var rows = await store.GetLabelledAsync(PageServer.Pumps, PageServer.LiveVersion, from, bucket.GetProperty("to").GetDateTimeOffset());
            var expected = CalibrationStatistics.Compute([.. rows.Select(r => r.Probability)], [.. rows.Select(r => r.Outcome)], 0.95);
            Assert.Equal(expected.Labelled, bucket.GetProperty("labelled").GetInt32());
            if (expected.CalibrationSlope is { } slope)
            {
                estimated++;
                Assert.Equal(slope.Estimate, bucket.GetProperty("calibrationSlope").GetProperty("estimate").GetDouble(), 12);
                Assert.Equal(expected.CalibrationIntercept!.Value.Upper, bucket.GetProperty("calibrationIntercept").GetProperty("upper").GetDouble(), 12);
                Assert.Equal(expected.Auc!.Estimate, bucket.GetProperty("auc").GetProperty("estimate").GetDouble(), 12);
            }
            else
            {
                Assert.False(bucket.TryGetProperty("calibrationSlope", out _));
            }
        }

        Assert.True(estimated > 0);
    }

    [Fact]
    public async Task The_cusum_paths_end_where_the_running_charts_stand_with_their_value_and_signals()
    {
        // The charts take outcomes in once the 5-second horizon has passed.
        JsonElement report = default;
        Assert.True(await Eventually.HoldsAsync(async () =>
        {
            report = await _server.GetJsonAsync($"v1/models/{PageServer.Pumps}/monitor?window=all");
            return report.TryGetProperty("cusum", out var c) && c.TryGetProperty("up", out var up) && up.GetProperty("steps").GetInt64() == 1500;
        }, TimeSpan.FromSeconds(30)), "the charts did not take in the 1,500 outcomes");
        var paths = await _server.GetJsonAsync($"v1/models/{PageServer.Pumps}/monitor/cusum?window=all&points=100");
        foreach (var chart in new[] { "up", "down" })
        {
            var running = report.GetProperty("cusum").GetProperty(chart);
            var path = paths.GetProperty(chart);
            Assert.Equal(running.GetProperty("value").GetDouble(), path.GetProperty("value").GetDouble());
            Assert.Equal(running.GetProperty("threshold").GetDouble(), path.GetProperty("threshold").GetDouble());
            var points = path.GetProperty("points").EnumerateArray().Select(p => (Index: p[0].GetInt64(), Value: p[1].GetDouble())).ToList();
            Assert.InRange(points.Count, 2, 100);
            Assert.Equal(1500, points[^1].Index);
            Assert.True(points.Zip(points.Skip(1)).All(p => p.First.Index < p.Second.Index));
            Assert.All(points, p => Assert.True(p.Value >= 0));
            var signals = running.GetProperty("signals").EnumerateArray().Select(s => s.GetProperty("index").GetInt64()).ToList();
            Assert.Equal(signals, path.GetProperty("signals").EnumerateArray().Select(s => s.GetProperty("index").GetInt64()).ToList());
            if (chart == "up")
            {
                // Outcomes drawn with twice the model's odds: the upward chart signals, each time at or above the threshold
                // in force then (the thresholds follow the outcome rate, so an early one may be below today's).
                Assert.NotEmpty(signals);
                Assert.All(path.GetProperty("signals").EnumerateArray(), s => Assert.True(s.GetProperty("statistic").GetDouble() >= s.GetProperty("threshold").GetDouble()));
            }
        }
    }

    [Fact]
    public async Task The_overview_gives_every_version_with_its_status_counts_and_last_change()
    {
        // The overview reads the monitor's latest round (every 200 ms here): wait for the round after the outcomes.
        // The charts move on as outcomes mature (a CUSUM signal adds a reason), so the report is read again each time
        // until the overview and the report describe the same state.
        JsonElement judged = default;
        JsonElement overview = default;
        Assert.True(await Eventually.HoldsAsync(async () =>
        {
            judged = await _server.GetJsonAsync($"v1/models/{PageServer.Pumps}/monitor?window=30d");
            overview = await _server.GetJsonAsync("v1/overview");
            var first = overview.GetProperty("models").EnumerateArray().Single(m => m.GetProperty("model").GetString() == PageServer.Pumps)
                .GetProperty("versions")[0];
            return first.GetProperty("labelled").GetInt64() == judged.GetProperty("labelled").GetInt64()
                && first.GetProperty("reasons").GetRawText() == judged.GetProperty("reasons").GetRawText();
        }, TimeSpan.FromSeconds(20)), "the overview did not catch up with the outcomes");
        Assert.Equal(["24h", "7d", "30d", "all"], overview.GetProperty("windows").EnumerateArray().Select(w => w.GetString()!).ToArray());
        var pumps = overview.GetProperty("models").EnumerateArray().Single(m => m.GetProperty("model").GetString() == PageServer.Pumps);
        Assert.Equal(PageServer.LiveVersion, pumps.GetProperty("live").GetString());
        var versions = pumps.GetProperty("versions").EnumerateArray().ToList();
        Assert.Equal([("2026.11.1", "live"), ("2026.12.1", "shadow")], versions.Select(v => (v.GetProperty("version").GetString(), v.GetProperty("stage").GetString())).ToArray());
        var live = versions[0];
        Assert.Equal(1500, live.GetProperty("scored24h").GetInt64());
        Assert.Equal(1500, live.GetProperty("scoredLastHour").GetInt64());
        Assert.Equal(judged.GetProperty("events").GetInt64(), live.GetProperty("events").GetInt64());
        Assert.Equal(judged.GetProperty("status").GetString(), live.GetProperty("status").GetString());
        Assert.Equal(judged.GetProperty("reasons").EnumerateArray().Select(r => r.GetString()!).ToArray(),
            live.GetProperty("reasons").EnumerateArray().Select(r => r.GetString()!).ToArray());
        Assert.Equal(live.GetProperty("status").GetString(), live.GetProperty("lastChange").GetProperty("to").GetString());
        Assert.NotEmpty(live.GetProperty("lastChange").GetProperty("reasons").EnumerateArray());
    }

    [Fact]
    public async Task Bad_parameters_and_missing_keys_are_refused_with_the_field_named()
    {
        foreach (var (path, status, field) in new[]
        {
            ($"v1/models/{PageServer.Pumps}/monitor/trend?buckets=0", HttpStatusCode.BadRequest, "buckets"),
            ($"v1/models/{PageServer.Pumps}/monitor/trend?window=2d", HttpStatusCode.BadRequest, "window"),
            ($"v1/models/{PageServer.Pumps}/monitor/cusum?points=x", HttpStatusCode.BadRequest, "points"),
            ($"v1/models/{PageServer.Pumps}/monitor/cusum?version=9.9", HttpStatusCode.NotFound, "version"),
            ("v1/models/nope/monitor/trend", HttpStatusCode.NotFound, "model"),
        })
        {
            using var response = await _server.Http.GetAsync(new Uri(path, UriKind.Relative));
            Assert.Equal(status, response.StatusCode);
            using var json = JsonDocument.Parse(await response.Content.ReadAsStringAsync());
            Assert.StartsWith(field + ":", json.RootElement.GetProperty("message").GetString(), StringComparison.Ordinal);
        }

        using var anonymous = new HttpClient { BaseAddress = _server.Url };
        foreach (var path in new[] { "v1/overview", "v1/overview/events", $"v1/models/{PageServer.Pumps}/monitor/trend", $"v1/models/{PageServer.Pumps}/monitor/cusum" })
        {
            using var response = await anonymous.GetAsync(new Uri(path, UriKind.Relative));
            Assert.Equal(HttpStatusCode.Unauthorized, response.StatusCode);
        }

        anonymous.DefaultRequestHeaders.Authorization = new AuthenticationHeaderValue("Bearer", PageServer.ViewerKey);
        using var viewer = await anonymous.GetAsync(new Uri("v1/overview", UriKind.Relative));
        Assert.Equal(HttpStatusCode.OK, viewer.StatusCode);
    }
}
