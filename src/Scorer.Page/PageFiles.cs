using System.Security.Cryptography;
using System.Text;
using Microsoft.AspNetCore.Builder;
using Microsoft.AspNetCore.Http;
using Microsoft.AspNetCore.Routing;
using Microsoft.AspNetCore.StaticFiles;
using Microsoft.Extensions.FileProviders;

namespace Scorer.Page;

/// <summary>
/// The monitor page's files, embedded in this assembly (<c>src/Scorer.Page/Files/</c>), so the page works whatever the
/// working directory: <c>/</c> (the overview) and <c>/models/{model}</c> (a model) are HTML templates whose asset names
/// are filled in with each asset's content hash (<c>/page/page.css?v=…</c>); the assets under <c>/page/</c> (styles,
/// script, icon) are served by the framework's static file middleware (ETags, conditional and HEAD requests, types).
/// Nothing is fetched from anywhere else: the Content-Security-Policy allows this origin only. HTML is never cached
/// without asking again (<c>no-cache</c> with an ETag); a request for an asset that carries its current hash may keep
/// it for a year.
/// </summary>
public sealed class PageFiles
{
    /// <summary>This origin only; no inline script or style; no frames, no forms posted anywhere, no base URL.</summary>
    public const string ContentSecurityPolicy =
        "default-src 'none'; script-src 'self'; style-src 'self'; img-src 'self'; connect-src 'self'; font-src 'self'; " +
        "base-uri 'none'; form-action 'none'; frame-ancestors 'none'";

    private const string AssetPrefix = "scorer.page.";
    private const string HtmlPrefix = "scorer.html.";

    private readonly Dictionary<string, string> _assetHashes = new(StringComparer.Ordinal);
    private readonly Dictionary<string, Html> _html = new(StringComparer.Ordinal);

    public PageFiles()
    {
        var assembly = typeof(PageFiles).Assembly;
        foreach (var resource in assembly.GetManifestResourceNames().Where(n => n.StartsWith(AssetPrefix, StringComparison.Ordinal)))
        {
            _assetHashes[resource[AssetPrefix.Length..]] = Hash(Read(resource));
        }

        foreach (var resource in assembly.GetManifestResourceNames().Where(n => n.StartsWith(HtmlPrefix, StringComparison.Ordinal)))
        {
            var html = Encoding.UTF8.GetString(Read(resource));
            foreach (var (asset, hash) in _assetHashes)
            {
                html = html.Replace("{{" + asset + "}}", $"/page/{asset}?v={hash}", StringComparison.Ordinal);
            }

            var bytes = Encoding.UTF8.GetBytes(html);
            _html[resource[HtmlPrefix.Length..]] = new Html(bytes, Hash(bytes));
        }
    }

    /// <summary>The names of the embedded files (pages and assets).</summary>
    public IReadOnlyCollection<string> Names => [.. _html.Keys, .. _assetHashes.Keys];

    /// <summary>The static file middleware for the assets under <c>/page/</c>, with the page's headers.</summary>
    public void UseAssets(IApplicationBuilder app)
    {
        var types = new FileExtensionContentTypeProvider();
        types.Mappings[".js"] = "text/javascript; charset=utf-8";
        types.Mappings[".css"] = "text/css; charset=utf-8";
        app.UseStaticFiles(new StaticFileOptions
        {
            RequestPath = "/page",
            FileProvider = new EmbeddedFileProvider(typeof(PageFiles).Assembly, "scorer.page"),
            ContentTypeProvider = types,
            OnPrepareResponse = file =>
            {
                var context = file.Context;
                Secure(context.Response.Headers);
                var current = _assetHashes.GetValueOrDefault(file.File.Name);
                context.Response.Headers.CacheControl = current is not null && context.Request.Query["v"].ToString() == current
                    ? "public, max-age=31536000, immutable"
                    : "no-cache";
            },
        });
    }

    /// <summary>Maps the two pages.</summary>
    public void Map(IEndpointRouteBuilder app)
    {
        string[] methods = [HttpMethods.Get, HttpMethods.Head];
        app.MapMethods("/", methods, (HttpContext context) => Serve(context, "overview.html"));
        app.MapMethods("/models/{model}", methods, (HttpContext context) => Serve(context, "model.html"));
    }

    private Task Serve(HttpContext context, string name)
    {
        var page = _html[name];
        var headers = context.Response.Headers;
        Secure(headers);
        headers.ETag = "\"" + page.Hash + "\"";
        headers.CacheControl = "no-cache";
        if (context.Request.Headers.IfNoneMatch.ToString() == "\"" + page.Hash + "\"")
        {
            context.Response.StatusCode = StatusCodes.Status304NotModified;
            return Task.CompletedTask;
        }

        context.Response.ContentType = "text/html; charset=utf-8";
        context.Response.ContentLength = page.Bytes.Length;
        return HttpMethods.IsHead(context.Request.Method) ? Task.CompletedTask : context.Response.Body.WriteAsync(page.Bytes, context.RequestAborted).AsTask();
    }

    private static void Secure(IHeaderDictionary headers)
    {
        headers.ContentSecurityPolicy = ContentSecurityPolicy;
        headers.XContentTypeOptions = "nosniff";
        headers["Referrer-Policy"] = "no-referrer";
        headers["Cross-Origin-Opener-Policy"] = "same-origin";
    }

    private static byte[] Read(string resource)
    {
        using var stream = typeof(PageFiles).Assembly.GetManifestResourceStream(resource)!;
        using var copy = new MemoryStream();
        stream.CopyTo(copy);
        return copy.ToArray();
    }

    private static string Hash(byte[] bytes) => Convert.ToHexStringLower(SHA256.HashData(bytes))[..16];

    private sealed record Html(byte[] Bytes, string Hash);
}
