using System.Diagnostics;
using System.Globalization;
using System.Net;
using System.Text.Json;
using System.Text.Json.Nodes;
using Scorer.Store;
using Xunit.Abstractions;

namespace Scorer.Server.Tests;

/// <summary>
/// <c>GET /v1/models/{model}/labelled</c> at size and when the store fails: a million labelled rows (written straight
/// through the store's API, so that the test spends its time on the export) downloaded through real Kestrel on
/// loopback and checked line for line; the store down before the export (503 before any status line) and during it
/// (the response aborted, never ended as if whole), against a PostgreSQL server of the test's own.
/// </summary>
[Collection(MeasuredAlone.Name)] // the million-row test samples the process's memory
public sealed class LabelledExportTests(ITestOutputHelper output) : IDisposable
{
    private const string Model = "pump-bearing-failure";
    private const string Version = "2026.11.1";
    private const string Header = "prediction_id,version,stage,scored_at,key,eta,probability,outcome,implicit,vibration_rms,bearing_temp_c,hours_since_service,site";
    private static readonly string[] Sites = ["north", "east", "river"];

    /// <summary>An invented instant, on a whole second: row i is scored 10 s after row i − 1.</summary>
    private static readonly DateTimeOffset T0 = new(2025, 6, 1, 0, 0, 0, TimeSpan.Zero);

    private readonly TestFolder _folder = new();

    public void Dispose() => _folder.Dispose();

    [Fact]
    public async Task A_million_labelled_rows_download_whole_in_order_with_every_value_as_stored_in_bounded_memory()
    {
        const int rows = 1_000_000;
        WriteModel();
        await using var server = await RunningServer.StartAsync(_folder);
        var store = server.Service<IScorerStore>();
        var ids = await FillAsync(store, rows);

        // The monitor keeps every labelled prediction in memory (about 86 MB a million, LabelledCache): let it take them
        // in before the export, so that the memory sampled below is the export's.
        Assert.True(await Files.EventuallyAsync(async () =>
        {
            using var report = JsonDocument.Parse(await server.Http.GetStringAsync($"/v1/models/{Model}/monitor?window=all"));
            return report.RootElement.GetProperty("labelled").GetInt64() == rows;
        }, TimeSpan.FromMinutes(2)), "the monitor did not take the labelled rows in");

        // The server's memory, sampled while the file streams (the test's own share is the ids above, allocated before).
        GC.Collect();
        GC.WaitForPendingFinalizers();
        GC.Collect();
        var heapBefore = GC.GetTotalMemory(false);
        var workingSetBefore = Environment.WorkingSet;
        using var sampling = new CancellationTokenSource();
        long heapPeak = heapBefore, workingSetPeak = workingSetBefore;
        var sampler = Task.Run(async () =>
        {
            while (!sampling.IsCancellationRequested)
            {
                heapPeak = Math.Max(heapPeak, GC.GetTotalMemory(false));
                workingSetPeak = Math.Max(workingSetPeak, Environment.WorkingSet);
                try
                {
                    await Task.Delay(10, sampling.Token);
                }
                catch (OperationCanceledException)
                {
                }
            }
        });

        var clock = Stopwatch.StartNew();
        using var response = await server.Http.GetAsync($"/v1/models/{Model}/labelled", HttpCompletionOption.ResponseHeadersRead);
        Assert.Equal(HttpStatusCode.OK, response.StatusCode);
        Assert.Equal("text/csv", response.Content.Headers.ContentType!.MediaType);
        await using var body = await response.Content.ReadAsStreamAsync();
        using var reader = new StreamReader(body);
        Assert.Equal(Header, await reader.ReadLineAsync());
        var n = 0;
        long chars = 0;
        while (await reader.ReadLineAsync() is { } line)
        {
            Assert.True(n < rows, $"more than {rows} rows");
            var expected = Line(n, ids[n]);
            if (line != expected)
            {
                Assert.Fail($"row {n}:\n  got      {line}\n  expected {expected}");
            }

            chars += line.Length + 1;
            n++;
        }

        var elapsed = clock.Elapsed;
        await sampling.CancelAsync();
        await sampler;
        Assert.Equal(rows, n);
        output.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"{rows:N0} rows ({chars / 1e6:F0} MB of CSV) in {elapsed.TotalSeconds:F1} s: {rows / elapsed.TotalSeconds:N0} rows/s"));
        output.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"managed heap {heapBefore / 1e6:F0} MB before, {heapPeak / 1e6:F0} MB at most; working set {workingSetBefore / 1e6:F0} MB before, {workingSetPeak / 1e6:F0} MB at most"));

        // Bounded: the export holds about a page (5,000 rows), not the file; a server that kept the file would grow by
        // at least its size (UTF-8 bytes; twice that as .NET strings). The samples also count garbage not yet collected
        // (the client's lines too), up to the collector's young-generation budget: 22 to 45 MB measured.
        Assert.True(heapPeak - heapBefore < chars / 2, $"the managed heap grew by {(heapPeak - heapBefore) / 1e6:F0} MB during an export of {chars / 1e6:F0} MB");
    }

    [StoppablePostgresFact]
    public async Task With_the_store_down_the_export_answers_503_before_any_status_line_and_a_store_lost_mid_file_aborts_the_response()
    {
        const int rows = 150_000; // about 23 MB of CSV: several times what the server gets ahead of a client that stops reading (1.8 to 4.5 MB measured)
        WriteModel();
        await using var postgres = await StoppablePostgres.StartAsync();
        await using var server = await RunningServer.StartAsync(_folder, new Dictionary<string, string?>
        {
            ["Scorer:Store:Kind"] = "postgres",
            ["Scorer:Store:ConnectionString"] = postgres.ConnectionString,
        });
        var ids = await FillAsync(server.Service<IScorerStore>(), rows);

        // Lost mid-file: the client has the status line, the header and a first row; then the store goes away.
        using (var response = await server.Http.GetAsync($"/v1/models/{Model}/labelled", HttpCompletionOption.ResponseHeadersRead))
        {
            Assert.Equal(HttpStatusCode.OK, response.StatusCode);
            await using var body = await response.Content.ReadAsStreamAsync();
            using var reader = new StreamReader(body);
            Assert.Equal(Header, await reader.ReadLineAsync());
            Assert.Equal(Line(0, ids[0]), await reader.ReadLineAsync());
            await postgres.StopAsync();
            var received = 1;
            var cut = await Assert.ThrowsAnyAsync<IOException>(async () =>
            {
                while (await reader.ReadLineAsync() is not null)
                {
                    received++;
                }
            });
            output.WriteLine($"cut off after {received:N0} of {rows:N0} rows: {cut.GetType().Name}: {cut.Message}");
            Assert.True(received < rows, "the whole file arrived before the store went away; the test needs more rows");
        }

        // Down before the export: refused before any status line, in the API's error shape.
        using (var refused = await server.Http.GetAsync($"/v1/models/{Model}/labelled"))
        {
            await StoreOutageTests.AssertStoreDidNotAnswerAsync(refused, StoreOutageTests.NothingRecorded);
        }

        // Back: the whole file again.
        await postgres.RestartAsync();
        using (var whole = await server.Http.GetAsync($"/v1/models/{Model}/labelled", HttpCompletionOption.ResponseHeadersRead))
        {
            Assert.Equal(HttpStatusCode.OK, whole.StatusCode);
            using var reader = new StreamReader(await whole.Content.ReadAsStreamAsync());
            Assert.Equal(Header, await reader.ReadLineAsync());
            var n = 0;
            while (await reader.ReadLineAsync() is { } line)
            {
                Assert.Equal(Line(n, ids[n]), line);
                n++;
            }

            Assert.Equal(rows, n);
        }
    }

    /// <summary>The pump model with negatives reported explicitly, so that no sweep of the server's labels rows behind the test's back.</summary>
    private void WriteModel()
    {
        var model = JsonNode.Parse(File.ReadAllText(Files.Example("pump-bearings")))!;
        model["outcome"]!["negatives"] = "explicit";
        _folder.WriteModel("pump.json", model.ToJsonString());
    }

    /// <summary>
    /// Writes <paramref name="rows"/> predictions of the live version through the store's API, records a 1 for every
    /// seventh and an implicit 0 for the rest; returns the ids in prediction-time order.
    /// </summary>
    private async Task<Guid[]> FillAsync(IScorerStore store, int rows)
    {
        var clock = Stopwatch.StartNew();
        var ids = new Guid[rows];
        const int batch = 10_000;
        for (var start = 0; start < rows; start += batch)
        {
            var records = new List<PredictionRecord>(batch);
            var events = new List<OutcomeReport>();
            for (var i = start; i < Math.Min(rows, start + batch); i++)
            {
                ids[i] = Guid.CreateVersion7(At(i));
                var (eta, p) = Score(i);
                records.Add(new PredictionRecord(ids[i], Model, Version, Stage.Live, At(i), Key(i), eta, p, FeaturesJson(i)));
                if (i % 7 == 0)
                {
                    events.Add(new OutcomeReport(ids[i], null, 1));
                }
            }

            await store.WritePredictionsAsync(records);
            var receipt = await store.RecordOutcomesAsync(Model, events, ConflictPolicy.KeepFirst, At(rows));
            Assert.Equal(events.Count, receipt.Accepted);
        }

        var negatives = 0;
        int recorded;
        while ((recorded = await store.RecordImplicitNegativesAsync(Model, At(rows), At(rows))) > 0)
        {
            negatives += recorded;
        }

        Assert.Equal(rows - ((rows + 6) / 7), negatives);
        output.WriteLine(string.Create(CultureInfo.InvariantCulture, $"{rows:N0} predictions and outcomes written through the store in {clock.Elapsed.TotalSeconds:F1} s"));
        return ids;
    }

    private static DateTimeOffset At(int i) => T0.AddSeconds(10L * i);

    private static (double Eta, double P) Score(int i)
    {
        var eta = -3 + ((i % 1000) * 0.0061);
        return (eta, 1 / (1 + Math.Exp(-eta)));
    }

    /// <summary>No key for every tenth row; a key that CSV must quote for every tenth but one.</summary>
    private static string? Key(int i) => (i % 10) switch
    {
        0 => null,
        1 => $"pump \"{i}\", north",
        _ => $"wo-{i}",
    };

    private static double Vibration(int i) => 0.63 + ((i % 977) * 0.01);

    /// <summary>A missing reading (left out of the row, as the model file allows) for every thirteenth row.</summary>
    private static double? Temperature(int i) => i % 13 == 0 ? null : 27.2 + ((i % 571) * 0.1);

    private static double Hours(int i) => 19 + (i % 7944);

    private static string FeaturesJson(int i)
    {
        var row = new Dictionary<string, object> { ["vibration_rms"] = Vibration(i), ["hours_since_service"] = Hours(i), ["site"] = Sites[i % 3] };
        if (Temperature(i) is { } t)
        {
            row["bearing_temp_c"] = t;
        }

        return JsonSerializer.Serialize(row);
    }

    /// <summary>Row i as the export must write it: the columns of <see cref="Header"/>, numbers in shortest round-trip form.</summary>
    private static string Line(int i, Guid id)
    {
        static string R(double v) => v.ToString("R", CultureInfo.InvariantCulture);
        var (eta, p) = Score(i);
        var key = Key(i) switch
        {
            null => "",
            { } k when k.Contains(',', StringComparison.Ordinal) => "\"" + k.Replace("\"", "\"\"", StringComparison.Ordinal) + "\"",
            { } k => k,
        };
        var explicitEvent = i % 7 == 0;
        return string.Join(',', id.ToString(), Version, "live", At(i).ToString("yyyy-MM-ddTHH:mm:ss.ffffffZ", CultureInfo.InvariantCulture), key, R(eta), R(p),
            explicitEvent ? "1" : "0", explicitEvent ? "0" : "1", R(Vibration(i)), Temperature(i) is { } t ? R(t) : "", R(Hours(i)), Sites[i % 3]);
    }
}
