using System.Globalization;
using System.Text.Json;
using Microsoft.Playwright;

namespace Scorer.Page.Tests;

/// <summary>
/// The page against the real service: what it draws is what the monitor API reports, and it follows the service live.
/// Every server here has no API keys (loopback).
/// </summary>
[Collection("browser")]
public sealed class MonitorPageTests(BrowserFixture browser) : IAsyncLifetime
{
    private PageServer _server = null!;

    public async Task InitializeAsync() => _server = await PageServer.StartAsync();

    public async Task DisposeAsync() => await _server.DisposeAsync();

    [Fact]
    public async Task The_overview_lists_every_model_with_its_live_and_shadow_versions_status_traffic_and_last_change()
    {
        var scored = await _server.ScorePumpsAsync(400, seed: 1);
        await _server.PostOutcomesAsync(scored, oddsRatio: 1, seed: 2);
        await using var session = await browser.OpenAsync(_server.Url);
        var page = session.Page;
        await page.GotoAsync(_server.Url.ToString());
        await session.WaitAsync($"() => document.querySelector('[data-model=\"{PageServer.Pumps}\"] tr[data-stage=\"live\"] td[data-labelled=\"400\"]') !== null");

        // The page shows what the overview API gives once both have the monitor's round after the outcomes.
        JsonElement overview = default;
        Assert.True(await Eventually.HoldsAsync(async () =>
        {
            overview = await _server.GetJsonAsync("v1/overview");
            var expected = overview.GetProperty("models").EnumerateArray().SelectMany(m => m.GetProperty("versions").EnumerateArray().Select(v =>
                $"{m.GetProperty("model").GetString()} {v.GetProperty("version").GetString()} {v.GetProperty("status").GetString()} {v.GetProperty("labelled").GetInt64()} {v.GetProperty("events").GetInt64()}"));
            var shown = await page.EvaluateAsync<string[]>("""
                () => [...document.querySelectorAll('section[data-model] tr[data-version]')].map(tr =>
                  `${tr.closest('section').dataset.model} ${tr.dataset.version} ${tr.querySelector('.chip').dataset.status} ${tr.querySelector('td[data-labelled]').dataset.labelled} ${tr.querySelector('td[data-events]').dataset.events}`)
                """);
            return expected.Order().SequenceEqual(shown.Order());
        }, TimeSpan.FromSeconds(30)), "the page did not come to show what the overview API gives");

        foreach (var model in overview.GetProperty("models").EnumerateArray())
        {
            var name = model.GetProperty("model").GetString()!;
            var card = page.Locator($"section[data-model=\"{name}\"]");
            await Assertions.Expect(card.Locator("h2")).ToHaveTextAsync(name);
            foreach (var version in model.GetProperty("versions").EnumerateArray())
            {
                var row = card.Locator($"tr[data-version=\"{version.GetProperty("version").GetString()}\"]");
                await Assertions.Expect(row).ToHaveAttributeAsync("data-stage", version.GetProperty("stage").GetString()!);
                var status = version.GetProperty("status").GetString()!;
                await Assertions.Expect(row.Locator(".chip")).ToHaveAttributeAsync("data-status", status);
                var word = status == "refit-due" ? "refit due" : status; // the page's word is the status, written as words
                await Assertions.Expect(row.Locator(".chip")).ToHaveTextAsync(word);
                Assert.Equal(version.GetProperty("labelled").GetInt64().ToString(CultureInfo.InvariantCulture),
                    await row.Locator("td[data-labelled]").GetAttributeAsync("data-labelled"));
                Assert.Equal(version.GetProperty("events").GetInt64().ToString(CultureInfo.InvariantCulture),
                    await row.Locator("td[data-events]").GetAttributeAsync("data-events"));
                // The last change of status, with its reasons, as the overview API gives it.
                var change = version.GetProperty("lastChange");
                foreach (var reason in change.GetProperty("reasons").EnumerateArray())
                {
                    await Assertions.Expect(card).ToContainTextAsync(reason.GetString()!);
                }
            }
        }

        var pumps = page.Locator($"section[data-model=\"{PageServer.Pumps}\"]");
        await Assertions.Expect(pumps.Locator($"tr[data-version=\"{PageServer.ShadowVersion}\"]")).ToHaveAttributeAsync("data-stage", "shadow");
        await Assertions.Expect(pumps.Locator($"tr[data-version=\"{PageServer.LiveVersion}\"]")).ToContainTextAsync("400");
        await session.ScreenshotAsync("overview");
        Assert.Empty(session.Outside);
        Assert.Empty(session.Errors);
    }

    [Fact]
    public async Task The_reliability_diagram_draws_exactly_the_bins_the_monitor_api_reports()
    {
        var scored = await _server.ScorePumpsAsync(1500, seed: 3);
        await _server.PostOutcomesAsync(scored, oddsRatio: 1, seed: 4);
        var report = await _server.GetJsonAsync($"v1/models/{PageServer.Pumps}/monitor?window=all");
        var labelled = report.GetProperty("labelled").GetInt64();
        Assert.Equal(1500, labelled);

        await using var session = await browser.OpenAsync(_server.Url);
        var page = session.Page;
        await page.GotoAsync(new Uri(_server.Url, $"models/{PageServer.Pumps}?window=all").ToString());
        await session.WaitAsync($"() => document.querySelector('#chart-reliability svg[data-labelled=\"{labelled}\"]') !== null");
        var marks = await page.Locator("#chart-reliability circle.bin").EvaluateAllAsync<string[][]>(
            "els => els.map(e => [e.dataset.meanPredicted, e.dataset.observedRate, e.dataset.count])");
        var bins = report.GetProperty("reliability").EnumerateArray().ToList();
        Assert.True(bins.Count >= 3, $"only {bins.Count} bins");
        Assert.Equal(bins.Count, marks.Length);
        for (var i = 0; i < bins.Count; i++)
        {
            Assert.Equal(bins[i].GetProperty("meanPredicted").GetDouble(), double.Parse(marks[i][0], CultureInfo.InvariantCulture));
            Assert.Equal(bins[i].GetProperty("observedRate").GetDouble(), double.Parse(marks[i][1], CultureInfo.InvariantCulture));
            Assert.Equal(bins[i].GetProperty("count").GetInt32(), int.Parse(marks[i][2], CultureInfo.InvariantCulture));
        }

        // The key figures and the other charts are drawn too.
        await Assertions.Expect(page.Locator("#figures")).ToContainTextAsync("1,500");
        await Assertions.Expect(page.Locator("#chart-psi svg rect.bar").First).ToBeVisibleAsync();
        await Assertions.Expect(page.Locator("#chart-cusum svg path.path-up")).ToBeVisibleAsync();
        await Assertions.Expect(page.Locator("#chart-intercept svg circle.point").First).ToBeVisibleAsync();
        await Assertions.Expect(page.Locator("#chart-auc svg circle.point").First).ToBeVisibleAsync();
        await Assertions.Expect(page.Locator("#table-shadows tr[data-shadow=\"2026.12.1\"]")).ToBeVisibleAsync();
        await session.ScreenshotAsync("model");
        Assert.Empty(session.Outside);
        Assert.Empty(session.Errors);
    }

    [Fact]
    public async Task A_status_change_arrives_live_through_the_event_stream_after_miscalibrated_outcomes()
    {
        await using var session = await browser.OpenAsync(_server.Url);
        var page = session.Page;
        await page.GotoAsync(new Uri(_server.Url, $"models/{PageServer.Pumps}?window=all").ToString());
        await Assertions.Expect(page.Locator("#status-slot .chip")).ToHaveAttributeAsync("data-status", "fine");
        await page.EvaluateAsync("() => { window.__sameDocument = true; }");

        // Outcomes with four times the odds the model gives: far more failures than predicted.
        var scored = await _server.ScorePumpsAsync(1500, seed: 5);
        await _server.PostOutcomesAsync(scored, oddsRatio: 4, seed: 6);

        await Assertions.Expect(page.Locator("#change")).ToHaveAttributeAsync("data-to", "recalibrate");
        await Assertions.Expect(page.Locator("#change")).ToContainTextAsync(new System.Text.RegularExpressions.Regex("^Status changed: fine → recalibrate"));
        await Assertions.Expect(page.Locator("#status-slot .chip")).ToHaveAttributeAsync("data-status", "recalibrate");
        var report = await _server.GetJsonAsync($"v1/models/{PageServer.Pumps}/monitor?window=all");
        Assert.Equal("recalibrate", report.GetProperty("status").GetString());
        Assert.Equal("recalibrate", report.GetProperty("action").GetString());
        await Assertions.Expect(page.Locator("#reasons")).ToContainTextAsync(report.GetProperty("reasons")[0].GetString()!);
        Assert.True(await page.EvaluateAsync<bool>("() => window.__sameDocument === true"), "the page was reloaded instead of updated live");
        await session.ScreenshotAsync("model-status-change");
        Assert.Empty(session.Errors);
    }

    [Fact]
    public async Task The_overview_keeps_the_keyboard_focus_and_opened_details_while_it_updates_live()
    {
        await using var session = await browser.OpenAsync(_server.Url);
        var page = session.Page;
        await page.GotoAsync(_server.Url.ToString());
        await session.WaitAsync("() => document.body.dataset.state === 'ready'");
        var open = page.Locator($"a[data-key=\"open|{PageServer.Pumps}\"]");
        await open.FocusAsync();
        var renders = await page.EvaluateAsync<int>("() => Number(document.getElementById('overview').dataset.renders)");

        var scored = await _server.ScorePumpsAsync(300, seed: 7);
        await _server.PostOutcomesAsync(scored, oddsRatio: 1, seed: 8);
        await session.WaitAsync($"() => document.querySelector('[data-model=\"{PageServer.Pumps}\"] tr[data-stage=\"live\"] td[data-labelled=\"300\"]') !== null");
        Assert.True(await page.EvaluateAsync<int>("() => Number(document.getElementById('overview').dataset.renders)") > renders);
        await Assertions.Expect(open).ToBeFocusedAsync();
        await page.Keyboard.PressAsync("Enter");
        // Enter follows the focused link. The page's address is polled until the navigation has committed: waiting for
        // the navigation event instead can miss one that commits before the wait subscribes (the test that failed so),
        // and the load is not awaited (the model view's event streams stay open).
        await Assertions.Expect(page).ToHaveURLAsync(new System.Text.RegularExpressions.Regex($"/models/{PageServer.Pumps}$"));
    }
}
