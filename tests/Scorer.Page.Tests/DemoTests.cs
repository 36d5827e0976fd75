using System.Text.RegularExpressions;
using Microsoft.Playwright;

namespace Scorer.Page.Tests;

/// <summary><c>scorer demo</c>: the service with the demo models and invented traffic, watched through the page.</summary>
[Collection("browser")]
public sealed partial class DemoTests(BrowserFixture browser)
{
    [GeneratedRegex(@"open (http://127\.0\.0\.1:[0-9]+)/ in a browser")]
    private static partial Regex Url();

    [Fact]
    public async Task The_demo_brings_the_page_to_life_and_its_drift_moves_the_pump_model_off_fine()
    {
        var folder = Directory.CreateTempSubdirectory("scorer-demo-test-").FullName;
        var output = new StringWriter();
        var stdout = TextWriter.Synchronized(output);
        var stderr = TextWriter.Synchronized(new StringWriter());
        var run = Task.Run(() => Scorer.Cli.Program.Run(
            ["demo", "--folder", folder, "--http", "127.0.0.1:0", "--grpc", "127.0.0.1:0", "--duration", "75", "--drift-after", "4", "--rate", "60", "--seed", "7"],
            stdout, stderr));
        try
        {
            string? url = null;
            Assert.True(await Eventually.HoldsAsync(() =>
            {
                var m = Url().Match(output.ToString());
                url = m.Success ? m.Groups[1].Value : null;
                return Task.FromResult(url is not null || run.IsCompleted);
            }, TimeSpan.FromSeconds(60)), "the demo printed no URL");
            Assert.True(url is not null, "the demo ended early: " + output + stderr);

            await using var session = await browser.OpenAsync(new Uri(url + "/"));
            var page = session.Page;
            await page.GotoAsync(url + "/");
            var pumps = page.Locator("section[data-model=\"pump-bearing-failure\"]");
            var cards = page.Locator("section[data-model=\"card-chargeback\"]");
            await Assertions.Expect(pumps.Locator("tr[data-version=\"2026.12.1\"]")).ToHaveAttributeAsync("data-stage", "shadow");
            await session.WaitAsync("""
                () => [...document.querySelectorAll('tr[data-stage="live"] td[data-labelled]')].filter(td => Number(td.dataset.labelled) > 0).length === 2
                """);

            // After the drift (pump failures twice as likely) the upward chart signals or the O/E leaves its tolerance.
            await Assertions.Expect(pumps.Locator("tr[data-stage=\"live\"] .chip")).Not.ToHaveAttributeAsync("data-status", "fine",
                new LocatorAssertionsToHaveAttributeOptions { Timeout = 60_000 });
            Assert.Contains("the drift begins", output.ToString(), StringComparison.Ordinal);
            await Assertions.Expect(cards.Locator("tr[data-stage=\"live\"] .chip")).ToBeVisibleAsync();
            await session.ScreenshotAsync("demo-overview");
            await page.GotoAsync(url + "/models/pump-bearing-failure?window=24h");
            await session.WaitAsync("() => document.querySelectorAll('#chart-reliability circle.bin').length > 0 && document.querySelector('#chart-cusum svg path.path-up')");
            await session.ScreenshotAsync("demo-model");
            Assert.Empty(session.Outside);
        }
        finally
        {
            Assert.Equal(0, await run);
            Directory.Delete(folder, recursive: true);
        }

        Assert.Contains("Scorer demo: stopping.", output.ToString(), StringComparison.Ordinal);
    }

    [Fact]
    public void The_demo_refuses_bad_options_naming_each_and_starts_nothing()
    {
        var stdout = new StringWriter();
        var stderr = new StringWriter();
        var exit = Scorer.Cli.Program.Run(["demo", "--http", "0.0.0.0:8080", "--rate", "0", "--duration", "-5", "--drift-after", "-1"], stdout, stderr);
        Assert.Equal(2, exit);
        var errors = stderr.ToString();
        foreach (var option in new[] { "--http: '0.0.0.0:8080' is not a loopback", "--rate: 0 ", "--duration: -5 ", "--drift-after: -1 " })
        {
            Assert.Contains("scorer demo: " + option, errors, StringComparison.Ordinal);
        }

        Assert.DoesNotContain("open http", stdout.ToString(), StringComparison.Ordinal);
    }
}
