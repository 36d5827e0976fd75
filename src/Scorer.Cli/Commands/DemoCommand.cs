using System.CommandLine;
using System.Diagnostics;
using System.Globalization;
using System.Net;
using System.Text;
using System.Text.Json;
using Microsoft.AspNetCore.Builder;
using Microsoft.AspNetCore.Hosting.Server;
using Microsoft.AspNetCore.Hosting.Server.Features;
using Microsoft.Extensions.Configuration;
using Microsoft.Extensions.DependencyInjection;
using Scorer.ModelFile;
using Scorer.Statistics.Recalibration;

namespace Scorer.Cli.Commands;

/// <summary>
/// <c>scorer demo</c>: the service in this process on loopback with the demo models (their outcome horizons shortened to
/// seconds, and a shadow version of the pump model), driven by invented traffic from seeded generators: pump-bearing
/// snapshots and card-not-present payments, scored through the REST API, with outcomes posted a few seconds later.
/// Partway through the world changes: pump failures become twice as likely (odds × 2), and card payments move toward
/// digital goods and new devices. The monitor refreshes every 2 s, so the page shows it within a minute or two.
/// </summary>
internal static class DemoCommand
{
    /// <summary>The horizon the demo copies of the models get: outcomes mature while you watch.</summary>
    public const string DemoHorizon = "PT10S";

    public const string ShadowVersion = "2026.12.1";

    internal sealed record Options(string? Folder, string Http, string Grpc, double? Duration, int Seed, double DriftAfter, double Rate);

    public static Command Create(TextWriter stdout, TextWriter stderr)
    {
        var folder = new Option<string?>("--folder") { Description = "Folder for the models and the store (default: a new temporary folder)." };
        var http = new Option<string>("--http") { Description = "HOST:PORT for REST and the page, on loopback.", DefaultValueFactory = _ => "127.0.0.1:8080" };
        var grpc = new Option<string>("--grpc") { Description = "HOST:PORT for gRPC (h2c), on loopback.", DefaultValueFactory = _ => "127.0.0.1:8081" };
        var duration = new Option<double?>("--duration") { Description = "Stop after this many seconds (default: run until Ctrl+C)." };
        var seed = new Option<int>("--seed") { Description = "Seed of the invented traffic.", DefaultValueFactory = _ => 20261201 };
        var drift = new Option<double>("--drift-after") { Description = "Seconds before the world changes.", DefaultValueFactory = _ => 40 };
        var rate = new Option<double>("--rate") { Description = "Pump snapshots scored per second (card payments: twice as many).", DefaultValueFactory = _ => 25 };
        var command = new Command("demo", "Run the service with the demo models and invented traffic, with a drift partway through; open the printed URL.")
        {
            folder, http, grpc, duration, seed, drift, rate,
        };
        command.SetAction((r, cancellationToken) => RunAsync(
            new Options(r.GetValue(folder), r.GetValue(http)!, r.GetValue(grpc)!, r.GetValue(duration), r.GetValue(seed), r.GetValue(drift), r.GetValue(rate)),
            stdout, stderr, cancellationToken));
        return command;
    }

    /// <summary>Runs the demo until the duration passes or <paramref name="cancellationToken"/> is cancelled; 0 when it ran, 2 for bad options.</summary>
    public static async Task<int> RunAsync(Options options, TextWriter stdout, TextWriter stderr, CancellationToken cancellationToken)
    {
        var problems = new List<string>();
        if (options.Duration is { } d && !(d > 0 && d <= 7 * 86400))
        {
            problems.Add($"--duration: {d.ToString(CultureInfo.InvariantCulture)} is not a number of seconds from 0 (exclusive) to a week");
        }

        if (!(options.DriftAfter >= 0 && options.DriftAfter <= 86400))
        {
            problems.Add($"--drift-after: {options.DriftAfter.ToString(CultureInfo.InvariantCulture)} is not a number of seconds from 0 to a day");
        }

        if (!(options.Rate > 0 && options.Rate <= 500))
        {
            problems.Add($"--rate: {options.Rate.ToString(CultureInfo.InvariantCulture)} is not a number of rows per second above 0 and at most 500");
        }

        foreach (var (name, value) in new[] { ("--http", options.Http), ("--grpc", options.Grpc) })
        {
            var colon = value.LastIndexOf(':');
            var host = colon > 0 ? value[..colon].Trim('[', ']') : "";
            if (!(host == "localhost" || (IPAddress.TryParse(host, out var address) && IPAddress.IsLoopback(address))))
            {
                problems.Add($"{name}: '{value}' is not a loopback HOST:PORT; the demo listens on this machine only (e.g. 127.0.0.1:8080)");
            }
        }

        if (problems.Count > 0)
        {
            foreach (var problem in problems)
            {
                await stderr.WriteLineAsync("scorer demo: " + problem).ConfigureAwait(false);
            }

            return 2;
        }

        var root = options.Folder ?? Directory.CreateTempSubdirectory("scorer-demo-").FullName;
        var models = Path.Combine(root, "models");
        Directory.CreateDirectory(models);
        WriteModels(models);
        string[] args = ["--models", models, "--store", Path.Combine(root, "data", "scorer.db"), "--http", options.Http, "--grpc", options.Grpc];
        WebApplication app;
        try
        {
            app = await Scorer.Host.ScorerServer.BuildAsync(args, b => b.Configuration.AddInMemoryCollection(new Dictionary<string, string?>
            {
                ["Scorer:SeedDemoModels"] = "false",
                ["Scorer:LogLevel"] = "Warning",
                ["Scorer:LogFormat"] = "text",
                ["Scorer:Monitor:ReportInterval"] = "00:00:02",
                ["Scorer:Monitor:PollInterval"] = "00:00:00.250",
            })).ConfigureAwait(false);
        }
        catch (Microsoft.Extensions.Options.OptionsValidationException ex)
        {
            await stderr.WriteLineAsync("scorer demo: the settings are not usable: " + string.Join("; ", ex.Failures)).ConfigureAwait(false);
            return 2;
        }

        await using (app.ConfigureAwait(false))
        {
            try
            {
                await app.StartAsync(cancellationToken).ConfigureAwait(false);
            }
            catch (IOException ex)
            {
                await stderr.WriteLineAsync($"scorer demo: cannot listen on {options.Http} and {options.Grpc}: {ex.Message} (choose others with --http and --grpc)")
                    .ConfigureAwait(false);
                return 2;
            }

            var url = app.Services.GetRequiredService<IServer>().Features.Get<IServerAddressesFeature>()!.Addresses.First().TrimEnd('/');
            await stdout.WriteLineAsync($"""
                Scorer demo: open {url}/ in a browser.
                  models and store in {root}
                  pump-bearing-failure 2026.11.1 (live) and {ShadowVersion} (shadow: the live version with the event odds doubled),
                  card-chargeback 2026.11.1 (live); outcome horizons shortened to 10 s for the demo; the monitor refreshes every 2 s.
                  Invented traffic: {options.Rate.ToString("0.##", CultureInfo.InvariantCulture)} pump snapshots and {(2 * options.Rate).ToString("0.##", CultureInfo.InvariantCulture)} card payments a second, outcomes 1 to 4 s later.
                  After {options.DriftAfter.ToString("0.##", CultureInfo.InvariantCulture)} s: pump failures become twice as likely; card payments shift toward digital goods and new devices.
                  {(options.Duration is { } seconds ? $"Stops after {seconds.ToString("0.##", CultureInfo.InvariantCulture)} s." : "Ctrl+C stops it.")}
                """).ConfigureAwait(false);
            await stdout.FlushAsync(cancellationToken).ConfigureAwait(false);

            // Ctrl+C and SIGTERM reach the host (its console lifetime), which stops the application: stop the traffic then.
            using var stop = CancellationTokenSource.CreateLinkedTokenSource(cancellationToken, app.Lifetime.ApplicationStopping);
            if (options.Duration is { } duration)
            {
                stop.CancelAfter(TimeSpan.FromSeconds(duration));
            }

            try
            {
                await new Traffic(new Uri(url + "/"), options, stdout).RunAsync(stop.Token).ConfigureAwait(false);
            }
            catch (OperationCanceledException) when (stop.IsCancellationRequested)
            {
            }
            catch (HttpRequestException ex)
            {
                await stderr.WriteLineAsync("scorer demo: the traffic stopped: " + ex.Message).ConfigureAwait(false);
            }

            await stdout.WriteLineAsync("Scorer demo: stopping.").ConfigureAwait(false);
            await app.StopAsync(CancellationToken.None).ConfigureAwait(false);
        }

        return 0;
    }

    /// <summary>
    /// The demo models: the embedded demo files with their horizons shortened (negatives reported explicitly, as the demo
    /// posts every outcome), and a shadow version of the pump model with ln 2 added to its intercept.
    /// </summary>
    internal static void WriteModels(string folder)
    {
        var assembly = typeof(Scorer.Host.ScorerServer).Assembly;
        ModelDocument Read(string name)
        {
            using var stream = assembly.GetManifestResourceStream("demo/" + name) ?? throw new InvalidOperationException($"the demo model {name} is not embedded");
            var document = ModelFileReader.ReadValid(stream);
            return document with
            {
                Outcome = document.Outcome with { Horizon = DemoHorizon, Negatives = NegativesPolicy.Explicit },
                Description = document.Description + $" Demo copy: the outcome horizon is {DemoHorizon} (not {document.Outcome.Horizon}) so that outcomes mature while you watch.",
            };
        }

        var pumps = Read("pump-bearing-failure.json");
        var cards = Read("card-chargeback.json");
        var fit = new RecalibrationFit(RecalibrationKind.InTheLarge, pumps.Link, Math.Log(2), 1.0, 0.08, 0.0, 0.0, 1, 0, 0.0, 0.0, 0);
        using var note = JsonDocument.Parse($$"""{"method": "none: a demo candidate, version {{pumps.Version}} with ln 2 added to its intercept (event odds doubled); not fitted to data"}""");
        var shadow = Recalibrator.Apply(pumps, fit, ShadowVersion) with
        {
            Description = $"Demo candidate: {pumps.Model} {pumps.Version} with ln 2 added to its intercept, so the odds of a failure report are doubled — " +
                "what a recalibration would give after the demo's drift. Not fitted to data; every number is invented.",
            Fit = note.RootElement.Clone(),
        };
        foreach (var (document, file) in new[] { (pumps, "pump-bearing-failure.json"), (shadow, $"pump-bearing-failure-{ShadowVersion}.json"), (cards, "card-chargeback.json") })
        {
            var path = Path.Combine(folder, file);
            var text = ModelFileWriter.WriteToString(document);
            if (!File.Exists(path) || File.ReadAllText(path) != text)
            {
                File.WriteAllText(path, text);
            }
        }
    }

    /// <summary>The invented traffic: scores through REST every quarter second, outcomes posted when they are due.</summary>
    private sealed class Traffic(Uri url, Options options, TextWriter stdout)
    {
        private static readonly string[] Sites = ["north", "east", "river"];
        private static readonly double[] SiteShares = [0.45, 0.35, 0.20];
        private static readonly string[] Categories = ["grocery", "travel", "electronics", "digital_goods"];
        private static readonly double[] CategoryShares = [0.40, 0.15, 0.20, 0.25];
        private static readonly double[] CategorySharesAfter = [0.15, 0.10, 0.15, 0.60];
        private static readonly double[] HourShares = [1, 0.7, 0.5, 0.4, 0.4, 0.5, 1, 2, 3.5, 4.5, 5, 5.5, 6, 5.5, 5, 5, 5.5, 6, 6.5, 6.5, 6, 5, 3.5, 2];

        private readonly Random _rng = new(options.Seed);
        private readonly PriorityQueue<(string Model, string Key, int Outcome), long> _due = new();
        private readonly Stopwatch _clock = Stopwatch.StartNew();
        private long _pumps;
        private long _cards;
        private double _pumpCarry;
        private double _cardCarry;

        public async Task RunAsync(CancellationToken cancellationToken)
        {
            using var http = new HttpClient { BaseAddress = url, Timeout = TimeSpan.FromSeconds(30) };
            using var tick = new PeriodicTimer(TimeSpan.FromMilliseconds(250));
            var nextReport = 10.0;
            var drifted = false;
            while (await tick.WaitForNextTickAsync(cancellationToken).ConfigureAwait(false))
            {
                var seconds = _clock.Elapsed.TotalSeconds;
                var after = seconds >= options.DriftAfter;
                if (after && !drifted)
                {
                    drifted = true;
                    await stdout.WriteLineAsync($"[{seconds,5:0} s] the drift begins: pump failures twice as likely; card payments shift toward digital goods and new devices")
                        .ConfigureAwait(false);
                }

                _pumpCarry += options.Rate / 4;
                _cardCarry += options.Rate / 2;
                var pumps = (int)_pumpCarry;
                var cards = (int)_cardCarry;
                _pumpCarry -= pumps;
                _cardCarry -= cards;
                await ScoreAsync(http, "pump-bearing-failure", pumps, after, cancellationToken).ConfigureAwait(false);
                await ScoreAsync(http, "card-chargeback", cards, after, cancellationToken).ConfigureAwait(false);
                await PostDueAsync(http, cancellationToken).ConfigureAwait(false);
                if (seconds >= nextReport)
                {
                    nextReport += 10;
                    await ReportAsync(http, seconds, cancellationToken).ConfigureAwait(false);
                }
            }
        }

        private async Task ScoreAsync(HttpClient http, string model, int count, bool after, CancellationToken cancellationToken)
        {
            if (count == 0)
            {
                return;
            }

            var pump = model == "pump-bearing-failure";
            var body = new StringBuilder("{\"contributions\":-1,\"rows\":[");
            var keys = new List<string>(count);
            for (var i = 0; i < count; i++)
            {
                body.Append(i > 0 ? "," : "").Append(pump ? PumpRow() : CardRow(after));
                keys.Add(pump ? $"WO-{++_pumps:D7}" : $"PAY-{++_cards:D8}");
            }

            body.Append("],\"keys\":[").Append(string.Join(",", keys.Select(k => $"\"{k}\""))).Append("]}");
            using var content = new StringContent(body.ToString(), Encoding.UTF8, "application/json");
            using var response = await http.PostAsync(new Uri($"v1/models/{model}/score", UriKind.Relative), content, cancellationToken).ConfigureAwait(false);
            response.EnsureSuccessStatusCode();
            using var json = JsonDocument.Parse(await response.Content.ReadAsStringAsync(cancellationToken).ConfigureAwait(false));
            var now = _clock.ElapsedMilliseconds;
            var index = 0;
            foreach (var result in json.RootElement.GetProperty("results").EnumerateArray())
            {
                var key = keys[index++];
                if (!result.TryGetProperty("probability", out var p))
                {
                    continue;
                }

                // The world: the model's probability, with the odds of a pump failure doubled after the drift.
                var probability = p.GetDouble();
                if (pump && after)
                {
                    probability = 2 * probability / (1 + probability);
                }

                var outcome = _rng.NextDouble() < probability ? 1 : 0;
                _due.Enqueue((model, key, outcome), now + 1000 + _rng.NextInt64(3000));
            }
        }

        private async Task PostDueAsync(HttpClient http, CancellationToken cancellationToken)
        {
            var now = _clock.ElapsedMilliseconds;
            var byModel = new Dictionary<string, List<string>>(StringComparer.Ordinal);
            while (_due.TryPeek(out var next, out var at) && at <= now)
            {
                _due.Dequeue();
                if (!byModel.TryGetValue(next.Model, out var list))
                {
                    byModel[next.Model] = list = [];
                }

                list.Add($"{{\"key\":\"{next.Key}\",\"outcome\":{next.Outcome}}}");
            }

            foreach (var (model, entries) in byModel)
            {
                using var content = new StringContent("{\"outcomes\":[" + string.Join(",", entries) + "]}", Encoding.UTF8, "application/json");
                using var response = await http.PostAsync(new Uri($"v1/models/{model}/outcomes", UriKind.Relative), content, cancellationToken).ConfigureAwait(false);
                response.EnsureSuccessStatusCode();
            }
        }

        /// <summary>One line per version: status, labelled predictions and events (read from the page's overview).</summary>
        private async Task ReportAsync(HttpClient http, double seconds, CancellationToken cancellationToken)
        {
            using var json = JsonDocument.Parse(await http.GetStringAsync(new Uri("v1/overview", UriKind.Relative), cancellationToken).ConfigureAwait(false));
            var parts = new List<string>();
            foreach (var model in json.RootElement.GetProperty("models").EnumerateArray())
            {
                foreach (var version in model.GetProperty("versions").EnumerateArray().Where(v => v.TryGetProperty("status", out _)))
                {
                    parts.Add($"{model.GetProperty("model").GetString()} {version.GetProperty("version").GetString()} {version.GetProperty("status").GetString()} " +
                        $"({version.GetProperty("labelled").GetInt64()} labelled, {version.GetProperty("events").GetInt64()} events)");
                }
            }

            await stdout.WriteLineAsync($"[{seconds,5:0} s] " + string.Join("; ", parts)).ConfigureAwait(false);
        }

        private string PumpRow()
        {
            var vibration = Math.Round(Math.Exp(Normal(Math.Log(2.5), 0.4)), 2);
            var temperature = Math.Round(Normal(55, 8), 1);
            double hours;
            do
            {
                hours = -1200 * (Math.Log(1 - _rng.NextDouble()) + Math.Log(1 - _rng.NextDouble())); // gamma, shape 2, mean 2,400 h
            }
            while (hours > 8000);

            return string.Create(CultureInfo.InvariantCulture,
                $"{{\"vibration_rms\":{Math.Max(0.05, vibration)},\"bearing_temp_c\":{temperature},\"hours_since_service\":{Math.Round(hours)},\"site\":\"{Sites[Pick(SiteShares)]}\"}}");
        }

        private string CardRow(bool after)
        {
            double amount;
            do
            {
                amount = Math.Round(Math.Exp(Normal(Math.Log(45), 1.0)), 2);
            }
            while (amount < 1.0);

            var category = Categories[Pick(after ? CategorySharesAfter : CategoryShares)];
            var hour = Pick(HourShares);
            var newDevice = _rng.NextDouble() < (after ? 0.35 : category == "digital_goods" ? 0.18 : 0.10) ? 1 : 0;
            return string.Create(CultureInfo.InvariantCulture,
                $"{{\"amount\":{amount},\"merchant_category\":\"{category}\",\"hour_of_day\":{hour},\"new_device\":{newDevice}}}");
        }

        /// <summary>A normal draw (Box–Muller).</summary>
        private double Normal(double mean, double sd) =>
            mean + (sd * Math.Sqrt(-2 * Math.Log(1 - _rng.NextDouble())) * Math.Cos(2 * Math.PI * _rng.NextDouble()));

        /// <summary>An index drawn with probability proportional to its share.</summary>
        private int Pick(double[] shares)
        {
            var u = _rng.NextDouble() * shares.Sum();
            for (var i = 0; i < shares.Length - 1; i++)
            {
                u -= shares[i];
                if (u < 0)
                {
                    return i;
                }
            }

            return shares.Length - 1;
        }
    }
}
