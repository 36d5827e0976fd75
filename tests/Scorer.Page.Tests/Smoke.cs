using Microsoft.Playwright;
namespace Scorer.Page.Tests;
public sealed class SmokeTests
{
    [Fact]
    public async Task Chromium_starts()
    {
        using var pw = await Playwright.CreateAsync();
        await using var browser = await pw.Chromium.LaunchAsync(new BrowserTypeLaunchOptions
        {
            ExecutablePath = "/usr/bin/chromium",
            Headless = true,
            Args = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run", "--disable-background-networking", "--disable-component-update", "--disable-sync"],
        });
        var page = await browser.NewPageAsync();
        await page.SetContentAsync("<p id=x>hello</p>");
        Assert.Equal("hello", await page.TextContentAsync("#x"));
    }
}
