using Microsoft.Extensions.Logging;
using Microsoft.Extensions.Logging.Abstractions;
using Scorer.ModelFile;
using Scorer.Registry;
using Scorer.Store;
using Scorer.Store.Sqlite;

namespace Scorer.Server.Tests;

/// <summary>
/// How the registry reads its folder, with a real SQLite store and real files, through <see cref="ModelRegistry.ReloadAsync"/>:
/// only regular files are opened (links followed, as in a ConfigMap), a file over the byte limit is refused from its
/// length, an unchanged file is not read again, and stage changes never wait for a file being loaded.
/// </summary>
public sealed class RegistryFilesTests : IAsyncLifetime
{
    private const string Model = "pump-bearing-failure";
    private static readonly TimeSpan Bound = TimeSpan.FromSeconds(30);

    private readonly TestFolder _folder = new();
    private SqliteScorerStore _store = null!;

    public async Task InitializeAsync()
    {
        _store = SqliteScorerStore.ForFile(_folder.Store);
        await _store.MigrateAsync();
    }

    public Task DisposeAsync()
    {
        _folder.Dispose();
        return Task.CompletedTask;
    }

    private ModelRegistry Registry(string? models = null, ModelFileReaderOptions? reader = null, ILogger<ModelRegistry>? logger = null) =>
        new(new RegistryOptions { ModelsPath = models ?? _folder.Models, Reader = reader ?? ModelFileReaderOptions.Default }, _store, TimeProvider.System,
            logger ?? NullLogger<ModelRegistry>.Instance);

    private static string WithVersion(string version) =>
        File.ReadAllText(Files.Example("pump-bearings")).Replace("\"version\": \"2026.11.1\"", $"\"version\": \"{version}\"", StringComparison.Ordinal);

    private static LoadFailure FailureOf(RegistrySnapshot snapshot, string name) =>
        Assert.Single(snapshot.Failures, f => Path.GetFileName(f.File) == name);

    [Fact]
    public async Task Links_to_model_files_load_as_in_a_ConfigMap_and_links_to_devices_pipes_or_nothing_are_listed_unopened()
    {
        // The layout the kubelet writes: the files in a timestamped folder, ..data a link to it, each name a link into ..data.
        var models = _folder.Models;
        var first = Directory.CreateDirectory(Path.Combine(models, "..2026_12_01_10_00_00.000000001")).FullName;
        File.Copy(Files.Example("pump-bearings"), Path.Combine(first, "pump.json"));
        File.CreateSymbolicLink(Path.Combine(models, "..data"), Path.GetFileName(first));
        File.CreateSymbolicLink(Path.Combine(models, "pump.json"), Path.Combine("..data", "pump.json"));
        var fifo = Path.Combine(_folder.Root, "pipe");
        ModelFolderTests.MakeFifo(fifo);
        File.CreateSymbolicLink(Path.Combine(models, "pipe.json"), fifo);
        File.CreateSymbolicLink(Path.Combine(models, "null.json"), "/dev/null");
        File.CreateSymbolicLink(Path.Combine(models, "dangling.json"), "nowhere.json");
        var registry = Registry();

        var snapshot = await registry.ReloadAsync().WaitAsync(Bound);

        Assert.Equal(Stage.Live, snapshot.Find(Model)!.Find("2026.11.1")!.Stage);
        foreach (var (name, what) in new[] { ("pipe.json", "a FIFO"), ("null.json", "a character device"), ("dangling.json", "a symbolic link to nothing") })
        {
            var failure = FailureOf(snapshot, name);
            Assert.Equal(LoadFailureKind.NotARegularFile, failure.Kind);
            Assert.Contains(what, Assert.Single(failure.Problems).Reason, StringComparison.Ordinal);
        }

        Assert.Equal(3, snapshot.Failures.Length);

        // The ConfigMap changes: a new folder with a new version beside the old one, ..data swapped in one rename.
        var second = Directory.CreateDirectory(Path.Combine(models, "..2026_12_02_10_00_00.000000002")).FullName;
        File.Copy(Files.Example("pump-bearings"), Path.Combine(second, "pump.json"));
        File.WriteAllText(Path.Combine(second, "pump-v2.json"), WithVersion("2026.12.1"));
        File.CreateSymbolicLink(Path.Combine(models, "..data_tmp"), Path.GetFileName(second));
        Run("mv", "-T", Path.Combine(models, "..data_tmp"), Path.Combine(models, "..data")); // rename(2) over the old link, as the kubelet does
        File.CreateSymbolicLink(Path.Combine(models, "pump-v2.json"), Path.Combine("..data", "pump-v2.json"));
        Directory.Delete(first, recursive: true);

        snapshot = await registry.ReloadAsync().WaitAsync(Bound);

        Assert.Equal(new[] { "2026.11.1", "2026.12.1" }, snapshot.Find(Model)!.Versions.Select(v => v.Version));
        Assert.Equal(3, snapshot.Failures.Length);
    }

    [Fact]
    public async Task A_file_over_the_byte_limit_is_refused_from_its_length_without_being_read()
    {
        _folder.AddModel(Files.Example("pump-bearings"), "pump.json");
        using (var huge = File.Create(Path.Combine(_folder.Models, "huge.json")))
        {
            huge.SetLength(200L * 1024 * 1024); // sparse: 200 MB long, nothing written
        }

        var registry = Registry();
        var snapshot = await registry.ReloadAsync();

        var failure = FailureOf(snapshot, "huge.json");
        Assert.Equal(LoadFailureKind.TooLarge, failure.Kind);
        var problem = Assert.Single(failure.Problems);
        Assert.Contains($"larger than the limit of {ModelFileReaderOptions.Default.MaxBytes} bytes (it has {200L * 1024 * 1024})", problem.Reason, StringComparison.Ordinal);
        Assert.Contains("ModelFileReaderOptions.MaxBytes", problem.Hint, StringComparison.Ordinal);
        Assert.Equal(1, registry.FileReads); // pump.json only

        await registry.ReloadAsync();
        Assert.Equal(1, registry.FileReads);
    }

    [Fact]
    public async Task An_unchanged_file_is_not_read_again_and_a_rewritten_one_is()
    {
        var path = _folder.AddModel(Files.Example("pump-bearings"), "pump.json");
        var registry = Registry();
        await registry.ReloadAsync();
        Assert.Equal(1, registry.FileReads);

        await registry.ReloadAsync();
        await registry.ReloadAsync();
        Assert.Equal(1, registry.FileReads);

        // Touched without a change: read again (its times changed) and found the same; nothing new is published.
        var generation = registry.Current.Generation;
        File.SetLastWriteTimeUtc(path, File.GetLastWriteTimeUtc(path).AddMinutes(-5));
        await registry.ReloadAsync();
        Assert.Equal(2, registry.FileReads);
        Assert.Equal(generation, registry.Current.Generation);

        // Rewritten with a new version: read again, and the new version loads beside the old one, which stays.
        File.WriteAllText(path, WithVersion("2026.12.1"));
        File.SetLastWriteTimeUtc(path, File.GetLastWriteTimeUtc(path).AddMinutes(5));
        var snapshot = await registry.ReloadAsync();
        Assert.Equal(3, registry.FileReads);
        Assert.Equal(new[] { "2026.11.1", "2026.12.1" }, snapshot.Find(Model)!.Versions.Select(v => v.Version));
    }

    [Fact]
    public async Task Stage_changes_do_not_wait_for_a_file_being_loaded()
    {
        _folder.AddModel(Files.Example("pump-bearings"), "pump.json");
        var logger = new HoldingLogger("pump-v2.json");
        var registry = Registry(logger: logger);
        await registry.ReloadAsync();

        // The scan is held while it validates the new file (between reading it and adding its compiled version).
        _folder.WriteModel("pump-v2.json", WithVersion("2026.12.1"));
        var reload = Task.Run(() => registry.ReloadAsync());
        try
        {
            await logger.Reached.Task.WaitAsync(Bound);

            var changes = await registry.SetStageAsync(Model, "2026.11.1", Stage.Retired, "test").WaitAsync(Bound);
            Assert.Equal(Stage.Retired, Assert.Single(changes).To);
            Assert.Equal(Stage.Retired, registry.Current.Find(Model)!.Find("2026.11.1")!.Stage);
            await registry.RefreshStagesAsync().WaitAsync(Bound);
            Assert.False(reload.IsCompleted);
        }
        finally
        {
            logger.Release();
        }

        var snapshot = await reload.WaitAsync(Bound);
        Assert.Equal(Stage.Retired, snapshot.Find(Model)!.Find("2026.11.1")!.Stage);
        Assert.NotNull(snapshot.Find(Model)!.Find("2026.12.1"));
    }

    [Fact]
    public async Task A_file_with_more_terms_than_the_limit_is_listed_and_the_others_load()
    {
        _folder.AddModel(Files.Example("pump-bearings"), "pump.json"); // 7 terms
        _folder.AddModel(Files.Example("card-payments"), "card.json"); // 8 terms
        var registry = Registry(reader: ModelFileReaderOptions.Default with { MaxTerms = 7 });

        var snapshot = await registry.ReloadAsync();

        Assert.NotNull(snapshot.Find(Model));
        var failure = Assert.Single(snapshot.Failures);
        Assert.Equal("card.json", Path.GetFileName(failure.File));
        Assert.Equal(LoadFailureKind.TooManyTerms, failure.Kind);
        Assert.Equal("$.terms", Assert.Single(failure.Problems).Path);
    }

    private static void Run(string program, params string[] args)
    {
        using var process = System.Diagnostics.Process.Start(new System.Diagnostics.ProcessStartInfo(program, args) { RedirectStandardError = true })!;
        process.WaitForExit();
        Assert.True(process.ExitCode == 0, $"{program}: " + process.StandardError.ReadToEnd());
    }

    /// <summary>
    /// The registry's logger, holding the thread that logs the "Reading" event of one file until released (at most a
    /// minute, so that a broken test fails instead of hanging).
    /// </summary>
    private sealed class HoldingLogger(string file) : ILogger<ModelRegistry>
    {
        private readonly ManualResetEventSlim _release = new();

        public TaskCompletionSource Reached { get; } = new(TaskCreationOptions.RunContinuationsAsynchronously);

        public void Release() => _release.Set();

        public IDisposable? BeginScope<TState>(TState state) where TState : notnull => null;

        public bool IsEnabled(LogLevel logLevel) => true;

        public void Log<TState>(LogLevel logLevel, EventId eventId, TState state, Exception? exception, Func<TState, Exception?, string> formatter)
        {
            if (eventId.Id == ModelRegistry.ReadingEventId && formatter(state, exception).Contains(file, StringComparison.Ordinal))
            {
                Reached.TrySetResult();
                _release.Wait(TimeSpan.FromMinutes(1));
            }
        }
    }
}
