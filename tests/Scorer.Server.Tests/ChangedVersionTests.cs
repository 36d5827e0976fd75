using System.Net;
using System.Security.Cryptography;
using System.Text;
using System.Text.Json;
using Microsoft.Extensions.Logging.Abstractions;
using Scorer.Registry;
using Scorer.Store.Sqlite;

namespace Scorer.Server.Tests;

/// <summary>
/// A version never changes under the same number: not within one process, not across a restart, not between replicas
/// sharing a store. The store keeps the SHA-256 of the file a version was first loaded from; a file with another hash
/// under that (model, version) is refused, listed, logged and counted.
/// </summary>
public sealed class ChangedVersionTests : IDisposable
{
    private const string Model = "pump-bearing-failure";
    private const string Version = "2026.11.1";
    private const string PumpRow = "{\"rows\":[{\"vibration_rms\":3.2,\"bearing_temp_c\":61,\"hours_since_service\":2500,\"site\":\"river\"}]}";

    private readonly TestFolder _folder = new();

    public void Dispose() => _folder.Dispose();

    /// <summary>The pump model with another intercept, under the same model and version.</summary>
    private static string WithOtherCoefficients()
    {
        var text = File.ReadAllText(Files.Example("pump-bearings"));
        var changed = text.Replace("\"coefficient\": -6.1813257364098835", "\"coefficient\": -1.5", StringComparison.Ordinal);
        Assert.NotEqual(text, changed);
        return changed;
    }

    private static string Sha(string path) => Convert.ToHexStringLower(SHA256.HashData(File.ReadAllBytes(path)));

    private static async Task<(HttpStatusCode Status, string Body)> ScoreAsync(RunningServer server)
    {
        using var content = new StringContent(PumpRow, Encoding.UTF8, "application/json");
        using var response = await server.Http.PostAsync($"/v1/models/{Model}/score", content);
        return (response.StatusCode, await response.Content.ReadAsStringAsync());
    }

    private static double Probability(string body)
    {
        using var json = JsonDocument.Parse(body);
        return json.RootElement.GetProperty("results")[0].GetProperty("probability").GetDouble();
    }

    private static async Task<JsonElement> LoadErrorAsync(RunningServer server, string file)
    {
        using var json = JsonDocument.Parse(await server.Http.GetStringAsync("/v1/models"));
        return json.RootElement.GetProperty("loadErrors").EnumerateArray().Single(e => e.GetProperty("file").GetString() == file).Clone();
    }

    private static void AssertNamesBothHashes(JsonElement error, string file, string loadedSha, string changedSha)
    {
        var problem = error.GetProperty("problems").EnumerateArray().Single();
        var reason = problem.GetProperty("reason").GetString()!;
        Assert.Equal("$.version", problem.GetProperty("path").GetString());
        Assert.Contains(file, reason, StringComparison.Ordinal);
        Assert.Contains($"'{Model}'", reason, StringComparison.Ordinal);
        Assert.Contains($"'{Version}'", reason, StringComparison.Ordinal);
        Assert.Contains(loadedSha[..12], reason, StringComparison.Ordinal);
        Assert.Contains(changedSha[..12], reason, StringComparison.Ordinal);
        Assert.Contains("a version never changes once loaded", reason, StringComparison.Ordinal);
        Assert.Equal("give the changed file a new version", problem.GetProperty("hint").GetString());
        Assert.Equal("changed_version", error.GetProperty("kind").GetString());
    }

    [Fact]
    public async Task A_changed_file_under_a_known_version_is_refused_after_a_restart()
    {
        var path = _folder.AddModel(Files.Example("pump-bearings"), "pump.json");
        var loadedSha = Sha(path);
        await using (var first = await RunningServer.StartAsync(_folder))
        {
            Assert.Equal(HttpStatusCode.OK, (await ScoreAsync(first)).Status);
        }

        File.WriteAllText(path, WithOtherCoefficients());
        await using var second = await RunningServer.StartAsync(_folder);

        // The version is not served with the new coefficients: nothing of the model is loaded.
        var (status, body) = await ScoreAsync(second);
        Assert.True(status == HttpStatusCode.NotFound, $"{(int)status} {body}");
        AssertNamesBothHashes(await LoadErrorAsync(second, "pump.json"), "pump.json", loadedSha, Sha(path));
        var metrics = await second.Http.GetStringAsync("/metrics");
        Assert.Contains("scorer_model_files_refused{reason=\"changed_version\"} 1", metrics, StringComparison.Ordinal);
        Assert.Contains("scorer_model_load_errors 1", metrics, StringComparison.Ordinal);
    }

    [Fact]
    public async Task After_a_restart_the_original_file_serves_and_a_changed_copy_under_the_same_version_is_refused()
    {
        var original = _folder.AddModel(Files.Example("pump-bearings"), "pump.json");
        string before;
        await using (var first = await RunningServer.StartAsync(_folder))
        {
            before = (await ScoreAsync(first)).Body;
        }

        // Sorts before pump.json, so a registry that took the first file of a version would take this one.
        var changed = _folder.WriteModel("a-pump-changed.json", WithOtherCoefficients());
        await using var second = await RunningServer.StartAsync(_folder);
        var (status, after) = await ScoreAsync(second);
        Assert.Equal(HttpStatusCode.OK, status);
        Assert.Equal(Probability(before), Probability(after));
        AssertNamesBothHashes(await LoadErrorAsync(second, "a-pump-changed.json"), "a-pump-changed.json", Sha(original), Sha(changed));
    }

    [Fact]
    public async Task A_replica_sharing_the_store_refuses_a_file_that_differs_from_the_one_another_replica_loaded()
    {
        var store = Path.Combine(_folder.Root, "shared.db");
        var folderA = Directory.CreateDirectory(Path.Combine(_folder.Root, "replica-a")).FullName;
        var folderB = Directory.CreateDirectory(Path.Combine(_folder.Root, "replica-b")).FullName;
        File.Copy(Files.Example("pump-bearings"), Path.Combine(folderA, "pump.json"));
        File.WriteAllText(Path.Combine(folderB, "pump.json"), WithOtherCoefficients());

        var storeA = SqliteScorerStore.ForFile(store);
        var storeB = SqliteScorerStore.ForFile(store);
        await storeA.MigrateAsync();
        var a = new ModelRegistry(new RegistryOptions { ModelsPath = folderA }, storeA, TimeProvider.System, NullLogger<ModelRegistry>.Instance);
        var b = new ModelRegistry(new RegistryOptions { ModelsPath = folderB }, storeB, TimeProvider.System, NullLogger<ModelRegistry>.Instance);

        var snapshotA = await a.ReloadAsync();
        var snapshotB = await b.ReloadAsync();

        Assert.Equal(Sha(Path.Combine(folderA, "pump.json")), snapshotA.Find(Model)!.Find(Version)!.Sha256);
        Assert.Null(snapshotB.Find(Model));
        var failure = Assert.Single(snapshotB.Failures);
        Assert.Equal(LoadFailureKind.ChangedVersion, failure.Kind);
        var problem = Assert.Single(failure.Problems);
        Assert.Contains(Sha(Path.Combine(folderA, "pump.json"))[..12], problem.Reason, StringComparison.Ordinal);
        Assert.Contains(Sha(Path.Combine(folderB, "pump.json"))[..12], problem.Reason, StringComparison.Ordinal);

        // The refusal holds at every later scan, and the first replica keeps its version.
        Assert.Single((await b.ReloadAsync()).Failures);
        Assert.Empty((await a.ReloadAsync()).Failures);
    }
}
