using Microsoft.Playwright;

namespace Scorer.Page.Tests;

/// <summary>
/// The admin actions on a service with API keys: the key is typed into the page, which keeps it in sessionStorage only;
/// every action asks first and shows what the service answered, a refusal included.
/// </summary>
[Collection("browser")]
public sealed class ActionsPageTests(BrowserFixture browser) : IAsyncLifetime
{
    private PageServer _server = null!;

    public async Task InitializeAsync() => _server = await PageServer.StartAsync(keys: true);

    public async Task DisposeAsync() => await _server.DisposeAsync();

    private async Task<PageSession> OpenModelAsync(string? key)
    {
        var session = await browser.OpenAsync(_server.Url);
        await session.Page.GotoAsync(new Uri(_server.Url, $"models/{PageServer.Pumps}").ToString());
        if (key is not null)
        {
            await session.Page.Locator("#key-input").FillAsync(key);
            await session.Page.Locator("#key-input").PressAsync("Enter");
            await Assertions.Expect(session.Page.Locator("#key-state")).ToHaveTextAsync("key in use (this tab)");
            await Assertions.Expect(session.Page.Locator("#status-slot .chip")).ToBeVisibleAsync();
        }

        return session;
    }

    private async Task<string> LiveVersionAsync()
    {
        var models = await _server.GetJsonAsync("v1/models");
        return models.GetProperty("models").EnumerateArray().Single(m => m.GetProperty("model").GetString() == PageServer.Pumps)
            .GetProperty("versions").EnumerateArray().Single(v => v.GetProperty("stage").GetString() == "live").GetProperty("version").GetString()!;
    }

    [Fact]
    public async Task An_admin_promotes_the_shadow_version_after_confirming_and_sees_the_result()
    {
        await using var session = await OpenModelAsync(PageServer.AdminKey);
        var page = session.Page;
        Assert.Equal(PageServer.AdminKey, await page.EvaluateAsync<string>("() => sessionStorage.getItem('scorer.apiKey')"));
        Assert.Equal(0, await page.EvaluateAsync<int>("() => localStorage.length"));
        Assert.DoesNotContain(PageServer.AdminKey, await page.EvaluateAsync<string>("() => document.cookie"), StringComparison.Ordinal);

        await page.Locator($"button[data-action=\"promote\"][data-version=\"{PageServer.ShadowVersion}\"]").ClickAsync();
        var dialog = page.Locator("#confirm");
        await Assertions.Expect(dialog).ToBeVisibleAsync();
        await Assertions.Expect(dialog).ToContainTextAsync($"Promote {PageServer.ShadowVersion}?");
        Assert.Equal(PageServer.LiveVersion, await LiveVersionAsync()); // nothing happens before the confirmation
        await page.Locator("#confirm-ok").ClickAsync();

        var result = page.Locator("#action-result");
        await Assertions.Expect(result).ToHaveAttributeAsync("data-outcome", "ok");
        await Assertions.Expect(result).ToContainTextAsync($"{PageServer.ShadowVersion} is now live");
        Assert.Equal(PageServer.ShadowVersion, await LiveVersionAsync());
        var history = await _server.GetJsonAsync($"v1/models/{PageServer.Pumps}/history");
        var last = history.GetProperty("changes").EnumerateArray().Last(c => c.GetProperty("to").GetString() == "live");
        Assert.Equal("page-admin", last.GetProperty("actor").GetString());
        // The page follows: the report is now the new live version's.
        await Assertions.Expect(page.Locator("#status-slot")).ToContainTextAsync($"{PageServer.ShadowVersion} (live)");
        await session.ScreenshotAsync("model-promoted");
        Assert.All(session.Errors, e => Assert.Contains("401", e, StringComparison.Ordinal)); // only the reads before the key was entered
    }

    [Fact]
    public async Task Without_a_key_the_page_shows_the_refusal_and_a_key_without_the_admin_role_cannot_promote()
    {
        await using var session = await OpenModelAsync(key: null);
        var page = session.Page;
        var notice = page.Locator("#notice");
        await Assertions.Expect(notice).ToBeVisibleAsync();
        await Assertions.Expect(notice).ToContainTextAsync("Refused: no valid key");
        await Assertions.Expect(notice).ToContainTextAsync("send 'Authorization: Bearer <key>'");
        await Assertions.Expect(page.Locator("#key-input")).ToBeFocusedAsync();
        await Assertions.Expect(page.Locator("button[data-action=\"promote\"]")).ToHaveCountAsync(0);

        // A key that may read but not change stages: the page shows the service's refusal, and nothing changes.
        await page.Locator("#key-input").FillAsync(PageServer.ViewerKey);
        await page.Locator("#key-input").PressAsync("Enter");
        await Assertions.Expect(notice).ToBeHiddenAsync();
        await page.Locator($"button[data-action=\"promote\"][data-version=\"{PageServer.ShadowVersion}\"]").ClickAsync();
        await page.Locator("#confirm-ok").ClickAsync();
        var result = page.Locator("#action-result");
        await Assertions.Expect(result).ToHaveAttributeAsync("data-outcome", "refused");
        await Assertions.Expect(result).ToContainTextAsync("Refused: the key lacks the role");
        await Assertions.Expect(result).ToContainTextAsync("the key 'page-viewer' lacks the 'admin' role");
        Assert.Equal(PageServer.LiveVersion, await LiveVersionAsync());
        await session.ScreenshotAsync("model-refused");
    }

    [Fact]
    public async Task Every_control_and_action_is_reachable_by_keyboard_and_the_confirmation_can_be_cancelled()
    {
        await using var session = await OpenModelAsync(PageServer.AdminKey);
        var page = session.Page;
        // From the top of the page, as a keyboard user arrives (the key stays in this tab's sessionStorage).
        await page.ReloadAsync();
        await Assertions.Expect(page.Locator("button[data-action=\"rollback\"]")).ToBeVisibleAsync();
        var reached = new List<string>();
        for (var i = 0; i < 40; i++)
        {
            await page.Keyboard.PressAsync("Tab");
            reached.Add(await page.EvaluateAsync<string>(
                "() => { const e = document.activeElement; return e.dataset.action ? 'action:' + e.dataset.action : e.type === 'radio' ? e.name : e.id || e.tagName.toLowerCase(); }"));
        }

        foreach (var expected in new[] { "key-input", "key-use", "version", "window", "action:promote", "action:rollback", "action:recalibrate" })
        {
            Assert.Contains(expected, reached);
        }

        // The window radios move with the arrow keys, as a native group does.
        await page.Locator("#window-7d").FocusAsync();
        await page.Keyboard.PressAsync("ArrowRight");
        await Assertions.Expect(page.Locator("#window-30d")).ToBeCheckedAsync();
        await Assertions.Expect(page).ToHaveURLAsync(new System.Text.RegularExpressions.Regex("window=30d"));

        var promote = page.Locator("button[data-action=\"promote\"]");
        await promote.FocusAsync();
        await page.Keyboard.PressAsync("Enter");
        await Assertions.Expect(page.Locator("#confirm")).ToBeVisibleAsync();
        await Assertions.Expect(page.Locator("#confirm-cancel")).ToBeFocusedAsync();
        await page.Keyboard.PressAsync("Escape");
        await Assertions.Expect(page.Locator("#confirm")).ToBeHiddenAsync();
        await Assertions.Expect(promote).ToBeFocusedAsync();
        Assert.Equal(PageServer.LiveVersion, await LiveVersionAsync());
        await Assertions.Expect(page.Locator("#action-result")).ToBeHiddenAsync();
    }
}
