using System.Text.Json;
using Microsoft.Playwright;

namespace Scorer.Page.Tests;

/// <summary>The page in the light and the dark colour scheme: every text it draws stays readable.</summary>
[Collection("browser")]
public sealed class LookTests(BrowserFixture browser) : IAsyncLifetime
{
    private PageServer _server = null!;

    public async Task InitializeAsync()
    {
        _server = await PageServer.StartAsync();
        var scored = await _server.ScorePumpsAsync(1200, seed: 11);
        await _server.PostOutcomesAsync(scored, oddsRatio: 1.6, seed: 12);
    }

    public async Task DisposeAsync() => await _server.DisposeAsync();

    // Contrast ratio of WCAG 2.1 (relative luminance of sRGB, (L1 + 0.05) / (L2 + 0.05)); 4.5 is level AA for body text
    // (success criterion 1.4.3). Each text's colour (fill for SVG text) is taken against the first opaque background
    // behind it.
    private const string Contrasts = """
        (selectors) => {
          const rgb = (text) => { const m = text.match(/rgba?\(([^)]+)\)/); if (!m) return null; const p = m[1].split(/[ ,\/]+/).filter(Boolean).map(Number); return { r: p[0], g: p[1], b: p[2], a: p.length > 3 ? p[3] : 1 }; };
          const lum = (c) => { const f = (v) => { v /= 255; return v <= 0.03928 ? v / 12.92 : ((v + 0.055) / 1.055) ** 2.4; }; return 0.2126 * f(c.r) + 0.7152 * f(c.g) + 0.0722 * f(c.b); };
          const background = (e) => { for (let n = e; n; n = n.parentElement) { const c = rgb(getComputedStyle(n).backgroundColor); if (c && c.a > 0.99) return c; } return rgb(getComputedStyle(document.documentElement).backgroundColor); };
          const out = [];
          for (const selector of selectors) {
            for (const e of document.querySelectorAll(selector)) {
              if (!e.textContent.trim() || e.getClientRects().length === 0) continue;
              const style = getComputedStyle(e);
              const fg = rgb(e instanceof SVGElement ? style.fill : style.color);
              const bg = background(e instanceof SVGElement ? e.closest('.panel') || e : e);
              const [a, b] = [lum(fg), lum(bg)].sort((x, y) => y - x);
              out.push({ selector, text: e.textContent.trim().slice(0, 40), ratio: (a + 0.05) / (b + 0.05) });
            }
          }
          return out;
        }
        """;

    [Theory]
    [InlineData("light")]
    [InlineData("dark")]
    public async Task Every_text_of_the_model_view_and_the_overview_has_at_least_the_AA_contrast(string scheme)
    {
        await using var session = await browser.OpenAsync(_server.Url, scheme == "dark" ? ColorScheme.Dark : ColorScheme.Light);
        var page = session.Page;
        await page.GotoAsync(new Uri(_server.Url, $"models/{PageServer.Pumps}?window=all").ToString());
        await session.WaitAsync("() => document.querySelector('#chart-reliability svg') && document.querySelector('#chart-cusum svg') && document.querySelector('#chart-auc svg')");
        Assert.Equal(scheme == "dark", await page.EvaluateAsync<bool>("() => matchMedia('(prefers-color-scheme: dark)').matches"));
        string[] selectors = ["h1", "h2", ".lede", ".hint", ".note", ".chip", ".service-name", ".figures dt", ".figures dd", ".figures dd small", "#reasons li",
            "#advice", "th", "td", "svg text", "button", "label", "summary", ".crumbs a", ".liveness", ".key-state", ".foot p"];
        var found = await page.EvaluateAsync<JsonElement>(Contrasts, selectors);
        await session.ScreenshotAsync($"model-{scheme}");
        await page.GotoAsync(_server.Url.ToString());
        await session.WaitAsync("() => document.body.dataset.state === 'ready'");
        var overview = await page.EvaluateAsync<JsonElement>(Contrasts, selectors);
        await session.ScreenshotAsync($"overview-{scheme}");

        var all = found.EnumerateArray().Concat(overview.EnumerateArray()).ToList();
        Assert.True(all.Count > 100, $"only {all.Count} texts measured");
        foreach (var selector in new[] { "svg text", ".chip", "td", ".hint", "button" })
        {
            Assert.Contains(all, t => t.GetProperty("selector").GetString() == selector);
        }

        var poor = all.Where(t => t.GetProperty("ratio").GetDouble() < 4.5)
            .Select(t => $"{t.GetProperty("selector").GetString()} '{t.GetProperty("text").GetString()}': {t.GetProperty("ratio").GetDouble():F2}").Distinct().ToList();
        Assert.True(poor.Count == 0, "below 4.5:1 — " + string.Join("; ", poor));
        Assert.Empty(session.Errors);
    }
}
