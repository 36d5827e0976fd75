using Scorer.Host;
using System.Diagnostics;
using System.Net;
using System.Text;
using System.Text.Json;

namespace Scorer.Server.Tests;

/// <summary>
/// One odd entry in the models folder (a file in another encoding, a FIFO, a link to a device, a huge or too wide file)
/// is listed with its reason; it never stops the service from starting, the other files from loading, stage changes
/// from answering or shutdown from finishing. Over the real server.
/// </summary>
public sealed class ModelFolderTests : IDisposable
{
    private const string Model = "pump-bearing-failure";
    private static readonly TimeSpan Bound = TimeSpan.FromSeconds(20);

    private readonly TestFolder _folder = new();

    public void Dispose() => _folder.Dispose();

    private static string WithVersion(string version) =>
        File.ReadAllText(Files.Example("pump-bearings")).Replace("\"version\": \"2026.11.1\"", $"\"version\": \"{version}\"", StringComparison.Ordinal);

    private static async Task<JsonDocument> ModelsAsync(RunningServer server) => JsonDocument.Parse(await server.Http.GetStringAsync("/v1/models"));

    private static async Task<bool> HasVersionAsync(RunningServer server, string version)
    {
        using var json = await ModelsAsync(server);
        return json.RootElement.GetProperty("models").EnumerateArray()
            .Any(m => m.GetProperty("model").GetString() == Model && m.GetProperty("versions").EnumerateArray().Any(v => v.GetProperty("version").GetString() == version));
    }

    private static async Task<JsonElement?> LoadErrorAsync(RunningServer server, string file)
    {
        using var json = await ModelsAsync(server);
        foreach (var error in json.RootElement.GetProperty("loadErrors").EnumerateArray())
        {
            if (error.GetProperty("file").GetString() == file)
            {
                return error.Clone();
            }
        }

        return null;
    }

    internal static void MakeFifo(string path)
    {
        using var mkfifo = Process.Start(new ProcessStartInfo("mkfifo", [path]) { RedirectStandardError = true })!;
        mkfifo.WaitForExit();
        Assert.True(mkfifo.ExitCode == 0, "mkfifo: " + mkfifo.StandardError.ReadToEnd());
    }

    [Fact]
    public async Task A_file_that_is_not_UTF8_is_listed_naming_the_byte_and_the_service_starts_and_goes_on_loading()
    {
        _folder.AddModel(Files.Example("pump-bearings"), "pump.json");
        // A description with "é" written as the single Latin-1 byte 0xE9, as an editor set to Latin-1 saves it.
        var latin1 = WithVersion("2026.12.5").Replace("\"description\": \"", "\"description\": \"Caf\u00e9 ", StringComparison.Ordinal);
        File.WriteAllBytes(Path.Combine(_folder.Models, "latin1.json"), Encoding.Latin1.GetBytes(latin1));

        await using var server = await RunningServer.StartAsync(_folder).WaitAsync(Bound);

        var error = await LoadErrorAsync(server, "latin1.json");
        Assert.NotNull(error);
        var problem = error.Value.GetProperty("problems").EnumerateArray().Single();
        Assert.Equal("$", problem.GetProperty("path").GetString());
        var reason = problem.GetProperty("reason").GetString()!;
        Assert.Contains("not valid UTF-8", reason, StringComparison.Ordinal);
        Assert.Contains("0xE9", reason, StringComparison.Ordinal);
        Assert.Contains("line ", reason, StringComparison.Ordinal);
        Assert.Contains("UTF-8", problem.GetProperty("hint").GetString(), StringComparison.Ordinal);
        Assert.True(await HasVersionAsync(server, "2026.11.1"));

        // Later files still load: the rescan does not stop at the odd one.
        _folder.WriteModel("pump-v2.json", WithVersion("2026.12.1"));
        Assert.True(await Files.EventuallyAsync(() => HasVersionAsync(server, "2026.12.1"), Bound));
    }

    [Fact]
    public async Task The_term_limit_is_a_setting_and_a_file_over_it_is_listed_naming_the_setting_and_counted()
    {
        _folder.AddModel(Files.Example("pump-bearings"), "pump.json"); // 7 terms
        _folder.AddModel(Files.Example("card-payments"), "card.json"); // 8 terms
        await using var server = await RunningServer.StartAsync(_folder, new Dictionary<string, string?> { ["Scorer:ModelFiles:MaxTerms"] = "7" });

        Assert.True(await HasVersionAsync(server, "2026.11.1"));
        var error = await LoadErrorAsync(server, "card.json");
        Assert.NotNull(error);
        Assert.Equal("too_many_terms", error.Value.GetProperty("kind").GetString());
        var problem = error.Value.GetProperty("problems").EnumerateArray().Single();
        Assert.Equal("$.terms", problem.GetProperty("path").GetString());
        Assert.Equal("8 terms is over the limit of 7 terms", problem.GetProperty("reason").GetString());
        Assert.Contains("raise Scorer:ModelFiles:MaxTerms", problem.GetProperty("hint").GetString(), StringComparison.Ordinal);

        var metrics = await server.Http.GetStringAsync("/metrics");
        Assert.Contains("scorer_model_files_refused{reason=\"too_many_terms\"} 1", metrics, StringComparison.Ordinal);
        Assert.Contains("scorer_model_files_refused{reason=\"changed_version\"} 0", metrics, StringComparison.Ordinal);
        Assert.Contains("scorer_model_file_reads_total 2", metrics, StringComparison.Ordinal);
    }

    [Theory]
    [InlineData("MaxTerms", "0")]
    [InlineData("MaxTerms", "10001")]
    [InlineData("MaxBytes", "100")]
    public void A_model_file_bound_out_of_range_is_refused_at_start_naming_the_setting(string setting, string value)
    {
        var options = new ScorerOptions();
        if (setting == "MaxTerms")
        {
            options.ModelFiles.MaxTerms = int.Parse(value, System.Globalization.CultureInfo.InvariantCulture);
        }
        else
        {
            options.ModelFiles.MaxBytes = long.Parse(value, System.Globalization.CultureInfo.InvariantCulture);
        }

        Assert.Contains(options.Validate(), p => p.StartsWith($"Scorer:ModelFiles:{setting} is {value};", StringComparison.Ordinal));
    }

    [Fact]
    public async Task A_fifo_named_like_a_model_file_is_listed_and_blocks_neither_start_nor_loading_nor_stage_changes_nor_shutdown()
    {
        _folder.AddModel(Files.Example("pump-bearings"), "pump.json");
        var fifo = Path.Combine(_folder.Models, "x.json");
        MakeFifo(fifo);
        RunningServer? server = null;
        try
        {
            server = await RunningServer.StartAsync(_folder).WaitAsync(Bound);

            var error = await LoadErrorAsync(server, "x.json");
            Assert.NotNull(error);
            var reason = error.Value.GetProperty("problems")[0].GetProperty("reason").GetString()!;
            Assert.Contains("not a regular file", reason, StringComparison.Ordinal);
            Assert.Contains("FIFO", reason, StringComparison.Ordinal);
            Assert.Equal("not_a_regular_file", error.Value.GetProperty("kind").GetString());
            Assert.Contains("scorer_model_files_refused{reason=\"not_a_regular_file\"} 1", await server.Http.GetStringAsync("/metrics"), StringComparison.Ordinal);

            _folder.WriteModel("pump-v2.json", WithVersion("2026.12.1"));
            Assert.True(await Files.EventuallyAsync(() => HasVersionAsync(server, "2026.12.1"), Bound));

            using var content = new StringContent("{\"stage\":\"live\"}", Encoding.UTF8, "application/json");
            using var promoted = await server.Http.PostAsync($"/v1/models/{Model}/versions/2026.12.1/stage", content).WaitAsync(Bound);
            Assert.Equal(HttpStatusCode.OK, promoted.StatusCode);
            await server.DisposeAsync().AsTask().WaitAsync(Bound);
            server = null;
        }
        catch (TimeoutException)
        {
            // A reader stuck opening the FIFO is let go by a writer, so that the test fails instead of hanging the run.
            _ = Task.Run(() =>
            {
                using var writer = new FileStream(fifo, FileMode.Open, FileAccess.Write);
            });
            throw;
        }
        finally
        {
            if (server is not null)
            {
                await server.DisposeAsync();
            }
        }
    }
}
