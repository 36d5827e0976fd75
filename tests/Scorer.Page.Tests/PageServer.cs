using System.Globalization;
using System.Net.Http.Headers;
using System.Text;
using System.Text.Json;
using Microsoft.AspNetCore.Builder;
using Microsoft.AspNetCore.Hosting.Server;
using Microsoft.AspNetCore.Hosting.Server.Features;
using Microsoft.Extensions.Configuration;
using Microsoft.Extensions.DependencyInjection;
using Scorer.ModelFile;
using Scorer.Statistics.Recalibration;
using Scorer.Host;
using Scorer.Store;

namespace Scorer.Page.Tests;

/// <summary>
/// The real server on loopback for the page: real Kestrel on ports the OS picks, a real SQLite file, a models folder
/// holding the pump model (live), a shadow version of it, and the card model; the monitor refreshing every 200 ms.
/// Optionally with API keys: <see cref="AdminKey"/> (admin) and <see cref="ViewerKey"/> (score only).
/// </summary>
internal sealed class PageServer : IAsyncDisposable
{
    public const string AdminKey = "page-admin-key-0123456789";
    public const string ViewerKey = "page-viewer-key-0123456789";
    public const string Pumps = "pump-bearing-failure";
    public const string Cards = "card-chargeback";
    public const string LiveVersion = "2026.11.1";
    public const string ShadowVersion = "2026.12.1";

    private readonly string _root;

    private PageServer(string root, WebApplication app, Uri url, bool keys)
    {
        _root = root;
        App = app;
        Url = url;
        Http = new HttpClient { BaseAddress = url };
        if (keys)
        {
            Http.DefaultRequestHeaders.Authorization = new AuthenticationHeaderValue("Bearer", AdminKey);
        }
    }

    public WebApplication App { get; }

    /// <summary>The REST address, ending in '/'.</summary>
    public Uri Url { get; }

    /// <summary>A client for the API (with the admin key when the server has keys).</summary>
    public HttpClient Http { get; }

    public static async Task<PageServer> StartAsync(bool keys = false, IDictionary<string, string?>? settings = null)
    {
        var root = Directory.CreateTempSubdirectory("scorer-page-").FullName;
        var models = Path.Combine(root, "models");
        Directory.CreateDirectory(models);
        WriteModels(models);
        string[] args = ["--models", models, "--store", Path.Combine(root, "data", "scorer.db"), "--http", "127.0.0.1:0", "--grpc", "127.0.0.1:0"];
        var app = await ScorerServer.BuildAsync(args, b =>
        {
            var values = new Dictionary<string, string?>
            {
                ["Scorer:RescanInterval"] = "00:00:00.250",
                ["Scorer:SeedDemoModels"] = "false",
                ["Scorer:PredictionLog:MaxDelay"] = "00:00:00.005",
                ["Scorer:LogLevel"] = "Warning",
                ["Scorer:Monitor:ReportInterval"] = "00:00:00.200",
                ["Scorer:Monitor:PollInterval"] = "00:00:00.050",
            };
            if (keys)
            {
                values["Scorer:Keys:0:Name"] = "page-admin";
                values["Scorer:Keys:0:Key"] = AdminKey;
                values["Scorer:Keys:0:Roles:0"] = "admin";
                values["Scorer:Keys:1:Name"] = "page-viewer";
                values["Scorer:Keys:1:Key"] = ViewerKey;
                values["Scorer:Keys:1:Roles:0"] = "score";
            }

            b.Configuration.AddInMemoryCollection(values);
            if (settings is not null)
            {
                b.Configuration.AddInMemoryCollection(settings);
            }
        });
        await app.StartAsync();
        var http = app.Services.GetRequiredService<IServer>().Features.Get<IServerAddressesFeature>()!.Addresses.First();
        return new PageServer(root, app, new Uri(http.TrimEnd('/') + "/"), keys);
    }

    /// <summary>
    /// The example models with a horizon of 5 s and explicit negatives (outcomes come back within a test), and a shadow
    /// version of the pump model with ln 2 added to its intercept.
    /// </summary>
    private static void WriteModels(string folder)
    {
        ModelDocument Read(string scenario)
        {
            var document = ModelFileReader.ReadValidFile(Path.Combine(Scorer.Testing.TestRepository.Root, "examples", scenario, "model.json"));
            return document with { Outcome = document.Outcome with { Horizon = "PT5S", Negatives = NegativesPolicy.Explicit } };
        }

        var pumps = Read("pump-bearings");
        var shadow = Recalibrator.Apply(pumps, new RecalibrationFit(RecalibrationKind.InTheLarge, pumps.Link, Math.Log(2), 1, 0.08, 0, 0, 1, 0, 0, 0, 0), ShadowVersion);
        ModelFileWriter.WriteFile(pumps, Path.Combine(folder, "pumps.json"));
        ModelFileWriter.WriteFile(shadow, Path.Combine(folder, "pumps-shadow.json"));
        ModelFileWriter.WriteFile(Read("card-payments"), Path.Combine(folder, "cards.json"));
    }

    public T Service<T>() where T : notnull => App.Services.GetRequiredService<T>();

    public async Task<JsonElement> GetJsonAsync(string path)
    {
        using var response = await Http.GetAsync(new Uri(path, UriKind.Relative));
        var text = await response.Content.ReadAsStringAsync();
        Assert.True(response.IsSuccessStatusCode, $"GET {path}: {(int)response.StatusCode} {text}");
        return JsonDocument.Parse(text).RootElement.Clone();
    }

    public async Task<JsonElement> PostJsonAsync(string path, string body)
    {
        using var content = new StringContent(body, Encoding.UTF8, "application/json");
        using var response = await Http.PostAsync(new Uri(path, UriKind.Relative), content);
        var text = await response.Content.ReadAsStringAsync();
        Assert.True(response.IsSuccessStatusCode, $"POST {path}: {(int)response.StatusCode} {text}");
        return JsonDocument.Parse(text).RootElement.Clone();
    }

    /// <summary>
    /// Scores <paramref name="count"/> invented pump snapshots (seeded) with keys <c>{prefix}-i</c>, waits until the log
    /// holds them, and returns each key with the live probability.
    /// </summary>
    public async Task<IReadOnlyList<(string Key, double Probability)>> ScorePumpsAsync(int count, int seed, string prefix = "WO")
    {
        var rng = new Random(seed);
        var rows = new List<string>(count);
        var keys = new List<string>(count);
        for (var i = 0; i < count; i++)
        {
            // The population of the model's training data (examples/pump-bearings/README.md): vibration lognormal around
            // 2.5 mm/s, temperature normal around 55 °C (Box–Muller), hours gamma with shape 2 and mean 2,400 below 8,000.
            var z1 = Math.Sqrt(-2 * Math.Log(1 - rng.NextDouble())) * Math.Cos(2 * Math.PI * rng.NextDouble());
            var z2 = Math.Sqrt(-2 * Math.Log(1 - rng.NextDouble())) * Math.Cos(2 * Math.PI * rng.NextDouble());
            double hours;
            do
            {
                hours = -1200 * (Math.Log(1 - rng.NextDouble()) + Math.Log(1 - rng.NextDouble()));
            }
            while (hours > 8000);

            var site = rng.NextDouble() switch { < 0.45 => "north", < 0.80 => "east", _ => "river" };
            rows.Add(string.Create(CultureInfo.InvariantCulture,
                $"{{\"vibration_rms\":{Math.Round(Math.Exp(Math.Log(2.5) + (0.4 * z1)), 2)},\"bearing_temp_c\":{Math.Round(55 + (8 * z2), 1)},\"hours_since_service\":{Math.Round(hours)},\"site\":\"{site}\"}}"));
            keys.Add($"{prefix}-{i}");
        }

        var store = Service<IScorerStore>();
        var before = await store.CountPredictionsAsync(Pumps, LiveVersion);
        var response = await PostJsonAsync($"v1/models/{Pumps}/score",
            "{\"contributions\":-1,\"rows\":[" + string.Join(",", rows) + "],\"keys\":[" + string.Join(",", keys.Select(k => $"\"{k}\"")) + "]}");
        var results = response.GetProperty("results").EnumerateArray().Select(r => r.GetProperty("probability").GetDouble()).ToList();
        Assert.True(await Eventually.HoldsAsync(async () => await store.CountPredictionsAsync(Pumps, LiveVersion) == before + count, TimeSpan.FromSeconds(20)),
            "the prediction log did not take in every scored row");
        return [.. keys.Zip(results)];
    }

    /// <summary>
    /// Posts an outcome for each scored row, drawn (seeded) with the model's probability after multiplying its odds by
    /// <paramref name="oddsRatio"/> (1: the model is right).
    /// </summary>
    public async Task PostOutcomesAsync(IReadOnlyList<(string Key, double Probability)> scored, double oddsRatio, int seed)
    {
        var rng = new Random(seed);
        var entries = scored.Select(s =>
        {
            var p = oddsRatio * s.Probability / (1 - s.Probability + (oddsRatio * s.Probability));
            return $"{{\"key\":\"{s.Key}\",\"outcome\":{(rng.NextDouble() < p ? 1 : 0)}}}";
        });
        await PostJsonAsync($"v1/models/{Pumps}/outcomes", "{\"outcomes\":[" + string.Join(",", entries) + "]}");
    }

    public async ValueTask DisposeAsync()
    {
        Http.Dispose();
        await App.StopAsync();
        await App.DisposeAsync();
        try
        {
            Directory.Delete(_root, recursive: true);
        }
        catch (IOException)
        {
        }
    }
}

internal static class Eventually
{
    /// <summary>Polls until the condition holds or the timeout passes; returns whether it held.</summary>
    public static async Task<bool> HoldsAsync(Func<Task<bool>> condition, TimeSpan timeout)
    {
        var until = Environment.TickCount64 + (long)timeout.TotalMilliseconds;
        while (Environment.TickCount64 < until)
        {
            if (await condition())
            {
                return true;
            }

            await Task.Delay(50);
        }

        return await condition();
    }
}
