using Microsoft.Playwright;

namespace Scorer.Page.Tests;

/// <summary>
/// Debian's Chromium (/usr/bin/chromium, headless) driven by Playwright; Playwright never downloads a browser. One
/// browser for the collection, a fresh context (1280×800, a laptop screen) per page.
/// </summary>
public sealed class BrowserFixture : IAsyncLifetime
{
    public const string Chromium = "/usr/bin/chromium";

    private IPlaywright _playwright = null!;

    public IBrowser Browser { get; private set; } = null!;

    /// <summary>Where the screenshots go, beside the test results scripts/test.sh writes (a CI artifact): TestResults/screenshots.</summary>
    public static string Screenshots { get; } = Path.Combine(Scorer.Testing.TestRepository.Root, "TestResults", "screenshots");

    public async Task InitializeAsync()
    {
        if (!File.Exists(Chromium))
        {
            throw new InvalidOperationException($"{Chromium} is missing: install Debian's Chromium (apt-get install -y chromium).");
        }

        Directory.CreateDirectory(Screenshots);
        Assertions.SetDefaultExpectTimeout(30_000); // an upper bound for conditions to come true, never a pause
        _playwright = await Playwright.CreateAsync();
        Browser = await _playwright.Chromium.LaunchAsync(new BrowserTypeLaunchOptions
        {
            ExecutablePath = Chromium,
            Headless = true,
            Args = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run", "--disable-background-networking",
                "--disable-component-update", "--disable-sync"],
        });
    }

    /// <summary>
    /// A page in a new context. Every request that leaves the server's origin is refused and recorded in
    /// <see cref="PageSession.Outside"/>; console errors (a broken script, a Content-Security-Policy violation) in
    /// <see cref="PageSession.Errors"/>.
    /// </summary>
    public async Task<PageSession> OpenAsync(Uri server, ColorScheme scheme = ColorScheme.Light)
    {
        var context = await Browser.NewContextAsync(new BrowserNewContextOptions
        {
            ViewportSize = new ViewportSize { Width = 1280, Height = 800 },
            ColorScheme = scheme,
            Locale = "en-GB",
            TimezoneId = "UTC",
        });
        var session = new PageSession(context, await context.NewPageAsync());
        var origin = server.GetLeftPart(UriPartial.Authority);
        await context.RouteAsync("**/*", async route =>
        {
            if (route.Request.Url.StartsWith(origin + "/", StringComparison.Ordinal))
            {
                await route.ContinueAsync();
            }
            else
            {
                session.Outside.Add(route.Request.Url);
                await route.AbortAsync();
            }
        });
        session.Page.Console += (_, message) =>
        {
            if (message.Type == "error")
            {
                session.Errors.Add(message.Text);
            }
        };
        session.Page.PageError += (_, error) => session.Errors.Add(error);
        session.Page.SetDefaultTimeout(30_000);
        return session;
    }

    public async Task DisposeAsync()
    {
        await Browser.DisposeAsync();
        _playwright.Dispose();
    }
}

/// <summary>A page with what it tried to fetch from elsewhere and the errors it logged.</summary>
public sealed class PageSession(IBrowserContext context, IPage page) : IAsyncDisposable
{
    public IPage Page { get; } = page;

    public List<string> Outside { get; } = [];

    public List<string> Errors { get; } = [];

    /// <summary>A full-page screenshot into <see cref="BrowserFixture.Screenshots"/>.</summary>
    public Task ScreenshotAsync(string name) =>
        Page.ScreenshotAsync(new PageScreenshotOptions { Path = Path.Combine(BrowserFixture.Screenshots, name + ".png"), FullPage = true });

    /// <summary>Waits until a JavaScript condition over the page holds (Playwright polls it; the timeout fails the test).</summary>
    public Task WaitAsync(string condition, object? argument = null) =>
        Page.WaitForFunctionAsync(condition, argument, new PageWaitForFunctionOptions { Timeout = 30_000, PollingInterval = 50 });

    public async ValueTask DisposeAsync() => await context.DisposeAsync();
}

[CollectionDefinition("browser")]
public sealed class BrowserCollection : ICollectionFixture<BrowserFixture>;
