using System.Security.Cryptography;
using System.Text;
using Microsoft.AspNetCore.Builder;
using Microsoft.AspNetCore.Http;
using Microsoft.AspNetCore.Routing;

namespace Scorer.Transport.Rest;

/// <summary>
/// The monitor page's files, embedded in this assembly (<c>src/Scorer.Transport/Page/</c>), so the page works whatever
/// the working directory: <c>/</c> (the overview), <c>/models/{model}</c> (a model), <c>/page/{file}</c> (styles,
/// script, icon). Nothing is fetched from anywhere else: the Content-Security-Policy allows this origin only.
/// HTML is never cached without asking again (<c>no-cache</c> with an ETag); the HTML names the other files with their
/// content hash (<c>?v=…</c>), and a request that carries the current hash may keep the file for a year.
/// </summary>
public sealed class PageFiles
{
    /// <summary>This origin only; no inline script or style; no frames, no forms posted anywhere, no base URL.</summary>
    public const string ContentSecurityPolicy =
        "default-src 'none'; script-src 'self'; style-src 'self'; img-src 'self'; connect-src 'self'; font-src 'self'; " +
        "base-uri 'none'; form-action 'none'; frame-ancestors 'none'";

    private const string Prefix = "page/";

    private readonly Dictionary<string, Asset> _assets = new(StringComparer.Ordinal);

    public PageFiles()
    {
        var assembly = typeof(PageFiles).Assembly;
        var raw = new Dictionary<string, byte[]>(StringComparer.Ordinal);
        foreach (var resource in assembly.GetManifestResourceNames().Where(n => n.StartsWith(Prefix, StringComparison.Ordinal)))
        {
            using var stream = assembly.GetManifestResourceStream(resource)!;
            using var copy = new MemoryStream();
            stream.CopyTo(copy);
            raw[resource[Prefix.Length..]] = copy.ToArray();
        }

        // Files other than HTML first: the HTML names them with their hashes.
        foreach (var (name, bytes) in raw.Where(r => !r.Key.EndsWith(".html", StringComparison.Ordinal)))
        {
            _assets[name] = new Asset(bytes, TypeOf(name), Hash(bytes));
        }

        foreach (var (name, bytes) in raw.Where(r => r.Key.EndsWith(".html", StringComparison.Ordinal)))
        {
            var html = Encoding.UTF8.GetString(bytes);
            foreach (var (other, asset) in _assets)
            {
                html = html.Replace("{{" + other + "}}", $"/page/{other}?v={asset.Hash}", StringComparison.Ordinal);
            }

            var final = Encoding.UTF8.GetBytes(html);
            _assets[name] = new Asset(final, TypeOf(name), Hash(final));
        }
    }

    /// <summary>The names of the embedded files.</summary>
    public IReadOnlyCollection<string> Names => _assets.Keys;

    public void Map(IEndpointRouteBuilder app)
    {
        string[] methods = [HttpMethods.Get, HttpMethods.Head];
        app.MapMethods("/", methods, (HttpContext context) => Serve(context, "overview.html"));
        app.MapMethods("/models/{model}", methods, (HttpContext context) => Serve(context, "model.html"));
        app.MapMethods("/page/{file}", methods, (HttpContext context, string file) => file.EndsWith(".html", StringComparison.Ordinal)
            ? NotFound(context)
            : Serve(context, file));
    }

    private Task Serve(HttpContext context, string name)
    {
        if (!_assets.TryGetValue(name, out var asset))
        {
            return NotFound(context);
        }

        var headers = context.Response.Headers;
        headers.ContentSecurityPolicy = ContentSecurityPolicy;
        headers.XContentTypeOptions = "nosniff";
        headers["Referrer-Policy"] = "no-referrer";
        headers["Cross-Origin-Opener-Policy"] = "same-origin";
        headers.ETag = "\"" + asset.Hash + "\"";
        headers.CacheControl = context.Request.Query["v"].ToString() == asset.Hash ? "public, max-age=31536000, immutable" : "no-cache";
        if (context.Request.Headers.IfNoneMatch.ToString() == "\"" + asset.Hash + "\"")
        {
            context.Response.StatusCode = StatusCodes.Status304NotModified;
            return Task.CompletedTask;
        }

        context.Response.ContentType = asset.ContentType;
        context.Response.ContentLength = asset.Bytes.Length;
        return HttpMethods.IsHead(context.Request.Method) ? Task.CompletedTask : context.Response.Body.WriteAsync(asset.Bytes, context.RequestAborted).AsTask();
    }

    private static Task NotFound(HttpContext context)
    {
        context.Response.StatusCode = StatusCodes.Status404NotFound;
        context.Response.ContentType = "text/plain; charset=utf-8";
        context.Response.Headers.XContentTypeOptions = "nosniff";
        return context.Response.WriteAsync("not found\n");
    }

    private static string TypeOf(string name) => Path.GetExtension(name) switch
    {
        ".html" => "text/html; charset=utf-8",
        ".css" => "text/css; charset=utf-8",
        ".js" => "text/javascript; charset=utf-8",
        ".svg" => "image/svg+xml",
        ".png" => "image/png",
        _ => "application/octet-stream",
    };

    private static string Hash(byte[] bytes) => Convert.ToHexStringLower(SHA256.HashData(bytes))[..16];

    private sealed record Asset(byte[] Bytes, string ContentType, string Hash);
}
