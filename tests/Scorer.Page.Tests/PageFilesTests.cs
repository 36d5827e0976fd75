using System.Net;
using System.Text.RegularExpressions;

namespace Scorer.Page.Tests;

/// <summary>The page's files as the service serves them: from the assembly, with their types, caching and a strict policy.</summary>
[Collection("browser")]
public sealed partial class PageFilesTests(BrowserFixture browser) : IAsyncLifetime
{
    private PageServer _server = null!;

    public async Task InitializeAsync() => _server = await PageServer.StartAsync();

    public async Task DisposeAsync() => await _server.DisposeAsync();

    [GeneratedRegex("(?:src|href)=\"(/page/[^\"?]+)\\?v=([0-9a-f]{16})\"")]
    private static partial Regex Asset();

    [Fact]
    public async Task Html_css_and_script_come_with_their_types_a_policy_of_this_origin_only_and_validating_caches()
    {
        using var home = await _server.Http.GetAsync(new Uri("/", UriKind.Relative));
        Assert.Equal(HttpStatusCode.OK, home.StatusCode);
        Assert.Equal("text/html", home.Content.Headers.ContentType!.MediaType);
        Assert.Equal("utf-8", home.Content.Headers.ContentType.CharSet);
        var policy = string.Join(";", home.Headers.GetValues("Content-Security-Policy"));
        Assert.Contains("default-src 'none'", policy, StringComparison.Ordinal);
        Assert.Contains("script-src 'self'", policy, StringComparison.Ordinal);
        Assert.Contains("connect-src 'self'", policy, StringComparison.Ordinal);
        Assert.DoesNotContain("http", policy, StringComparison.OrdinalIgnoreCase);
        Assert.DoesNotContain("unsafe", policy, StringComparison.Ordinal);
        Assert.Equal("nosniff", home.Headers.GetValues("X-Content-Type-Options").Single());
        Assert.Equal("no-cache", home.Headers.CacheControl!.ToString());
        var html = await home.Content.ReadAsStringAsync();
        Assert.DoesNotContain("http://", html, StringComparison.Ordinal);
        Assert.DoesNotContain("https://", html, StringComparison.Ordinal);
        Assert.DoesNotContain("<script>", html, StringComparison.Ordinal);
        Assert.DoesNotContain("style=", html, StringComparison.Ordinal);

        using (var again = new HttpRequestMessage(HttpMethod.Get, "/"))
        {
            again.Headers.IfNoneMatch.Add(home.Headers.ETag!);
            using var notModified = await _server.Http.SendAsync(again);
            Assert.Equal(HttpStatusCode.NotModified, notModified.StatusCode);
        }

        var assets = Asset().Matches(html).Select(m => (Path: m.Groups[1].Value, Hash: m.Groups[2].Value)).ToList();
        Assert.Equal(["/page/icon.svg", "/page/page.css", "/page/page.js"], assets.Select(a => a.Path).Order().ToArray());
        foreach (var (path, hash) in assets)
        {
            using var versioned = await _server.Http.GetAsync(new Uri($"{path}?v={hash}", UriKind.Relative));
            Assert.Equal(HttpStatusCode.OK, versioned.StatusCode);
            Assert.Equal(Path.GetExtension(path) switch { ".css" => "text/css", ".js" => "text/javascript", _ => "image/svg+xml" },
                versioned.Content.Headers.ContentType!.MediaType);
            Assert.Equal("public, max-age=31536000, immutable", versioned.Headers.CacheControl!.ToString());
            using (var revalidate = new HttpRequestMessage(HttpMethod.Get, path))
            {
                // The static file middleware's validator: a cache that holds the file is told it is current.
                revalidate.Headers.IfNoneMatch.Add(versioned.Headers.ETag!);
                using var unchanged = await _server.Http.SendAsync(revalidate);
                Assert.Equal(HttpStatusCode.NotModified, unchanged.StatusCode);
            }

            using var plain = await _server.Http.GetAsync(new Uri(path, UriKind.Relative));
            Assert.Equal("no-cache", plain.Headers.CacheControl!.ToString());
        }

        using var model = await _server.Http.GetAsync(new Uri($"/models/{PageServer.Pumps}", UriKind.Relative));
        Assert.Contains("data-view=\"model\"", await model.Content.ReadAsStringAsync(), StringComparison.Ordinal);
        using var head = await _server.Http.SendAsync(new HttpRequestMessage(HttpMethod.Head, "/"));
        Assert.Equal(HttpStatusCode.OK, head.StatusCode);
        Assert.Empty(await head.Content.ReadAsByteArrayAsync());
        foreach (var missing in new[] { "/page/nothing.css", "/page/overview.html", "/page/model.html" })
        {
            using var response = await _server.Http.GetAsync(new Uri(missing, UriKind.Relative));
            Assert.Equal(HttpStatusCode.NotFound, response.StatusCode);
        }
    }

    [Fact]
    public async Task The_page_works_whatever_the_working_directory_and_fetches_nothing_from_elsewhere()
    {
        var before = Environment.CurrentDirectory;
        var elsewhere = Directory.CreateTempSubdirectory("scorer-page-cwd-").FullName;
        PageServer server;
        try
        {
            Environment.CurrentDirectory = elsewhere; // an empty folder: the files must come from the assembly
            server = await PageServer.StartAsync();
        }
        finally
        {
            Environment.CurrentDirectory = before;
        }

        await using (server)
        {
            await using var session = await browser.OpenAsync(server.Url);
            var requests = new List<string>();
            session.Page.Request += (_, request) => requests.Add(request.Url);
            await session.Page.GotoAsync(new Uri(server.Url, $"models/{PageServer.Pumps}").ToString());
            await session.WaitAsync("() => document.body.dataset.state === 'ready'");
            await session.Page.GotoAsync(server.Url.ToString());
            await session.WaitAsync("() => document.body.dataset.state === 'ready'");
            Assert.Contains(requests, r => r.Contains("/page/page.js", StringComparison.Ordinal));
            Assert.Contains(requests, r => r.Contains("/page/page.css", StringComparison.Ordinal));
            Assert.Contains(requests, r => r.Contains("/v1/overview/events", StringComparison.Ordinal));
            Assert.All(requests, r => Assert.StartsWith(server.Url.GetLeftPart(UriPartial.Authority) + "/", r, StringComparison.Ordinal));
            Assert.Empty(session.Outside);
            Assert.Empty(session.Errors); // a Content-Security-Policy violation is logged as a console error
        }

        Directory.Delete(elsewhere, recursive: true);
    }
}
