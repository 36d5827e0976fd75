using System.Globalization;
using System.Net;

namespace Scorer.HealthProbe;

/// <summary>
/// Health probe for the container: <c>GET /healthz</c> on the REST endpoint of the service in the same container.
/// Exit 0 when it answers 200, 1 otherwise (Docker's HEALTHCHECK convention; 2 is reserved there).
/// </summary>
/// <remarks>
/// The address comes from the first argument (a URL such as <c>http://127.0.0.1:8080/healthz</c>), else from the
/// same setting the service reads, the <c>Scorer__Http</c> environment variable (<c>HOST:PORT</c>; an any-address host
/// such as 0.0.0.0 is probed on loopback), else <c>127.0.0.1:8080</c>, the service's default.
/// </remarks>
public static class Program
{
    private const string DefaultEndpoint = "127.0.0.1:8080";

    public static async Task<int> Main(string[] args)
    {
        Uri url;
        try
        {
            url = args.Length > 0 ? new Uri(args[0], UriKind.Absolute) : HealthUrl(HttpSetting());
        }
        catch (FormatException ex)
        {
            await Console.Error.WriteLineAsync("unhealthy: " + ex.Message).ConfigureAwait(false);
            return 1;
        }

        // 3 s by default (within the image's HEALTHCHECK timeout); SCORER_PROBE_TIMEOUT_SECONDS overrides it.
        var seconds = int.TryParse(Environment.GetEnvironmentVariable("SCORER_PROBE_TIMEOUT_SECONDS"), NumberStyles.None, CultureInfo.InvariantCulture, out var s) && s > 0 ? s : 3;
        using var client = new HttpClient { Timeout = TimeSpan.FromSeconds(seconds) };
        try
        {
            using var response = await client.GetAsync(url).ConfigureAwait(false);
            var status = (int)response.StatusCode;
            if (response.StatusCode == HttpStatusCode.OK)
            {
                await Console.Out.WriteLineAsync(string.Create(CultureInfo.InvariantCulture, $"healthy: {url} answered {status}")).ConfigureAwait(false);
                return 0;
            }

            await Console.Error.WriteLineAsync(string.Create(CultureInfo.InvariantCulture, $"unhealthy: {url} answered {status}")).ConfigureAwait(false);
            return 1;
        }
        catch (HttpRequestException ex)
        {
            await Console.Error.WriteLineAsync($"unhealthy: {url}: {ex.Message}").ConfigureAwait(false);
            return 1;
        }
        catch (TaskCanceledException)
        {
            await Console.Error.WriteLineAsync($"unhealthy: {url} did not answer within {client.Timeout.TotalSeconds.ToString(CultureInfo.InvariantCulture)} s").ConfigureAwait(false);
            return 1;
        }
    }

    /// <summary>The value of <c>Scorer__Http</c> (matched without regard to case, as .NET configuration does), or the default.</summary>
    private static string HttpSetting()
    {
        foreach (System.Collections.DictionaryEntry variable in Environment.GetEnvironmentVariables())
        {
            if (string.Equals((string)variable.Key, "Scorer__Http", StringComparison.OrdinalIgnoreCase) && variable.Value is string { Length: > 0 } value)
            {
                return value;
            }
        }

        return DefaultEndpoint;
    }

    /// <summary><c>HOST:PORT</c> to the health URL; any-address hosts become loopback of the same family.</summary>
    internal static Uri HealthUrl(string endpoint)
    {
        var colon = endpoint.LastIndexOf(':');
        if (colon <= 0 || !int.TryParse(endpoint[(colon + 1)..], NumberStyles.None, CultureInfo.InvariantCulture, out var port) || port is < 1 or > 65535)
        {
            throw new FormatException($"Scorer__Http is '{endpoint}'; give HOST:PORT, e.g. 0.0.0.0:8080");
        }

        var host = endpoint[..colon].Trim('[', ']');
        host = host switch
        {
            "0.0.0.0" or "*" or "+" => "127.0.0.1",
            "::" => "[::1]",
            _ when host.Contains(':', StringComparison.Ordinal) => "[" + host + "]",
            _ => host,
        };
        return new Uri(string.Create(CultureInfo.InvariantCulture, $"http://{host}:{port}/healthz"));
    }
}
