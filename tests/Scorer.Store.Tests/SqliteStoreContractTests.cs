using Scorer.Store.Sqlite;
using Xunit.Abstractions;

namespace Scorer.Store.Tests;

/// <summary>The contract, on a real SQLite file in a fresh temp folder per test (deleted after).</summary>
public sealed class SqliteStoreContractTests(ITestOutputHelper output) : StoreContractTests(output)
{
    private readonly TempFolder _folder = new();

    /// <summary>The SQLite store keeps microseconds.</summary>
    protected override TimeSpan TimePrecision => TimeSpan.FromMicroseconds(1);

    /// <summary>In a folder that does not exist yet, so every test also proves the store creates it.</summary>
    protected override Task<IScorerStore> CreateStoreAsync() =>
        Task.FromResult<IScorerStore>(SqliteScorerStore.ForFile(Path.Combine(_folder.Path, "data", "scorer.db")));

    protected override Task<IScorerStore> CreateStoreAsync(TimeSpan? predictionRetention, TimeSpan? outcomeRetention) =>
        Task.FromResult<IScorerStore>(SqliteScorerStore.ForFile(Path.Combine(_folder.Path, "data", "scorer.db"),
            new SqliteStoreOptions { PredictionRetention = predictionRetention, OutcomeRetention = outcomeRetention }));

    protected override Task DeleteStorageAsync()
    {
        _folder.Dispose();
        return Task.CompletedTask;
    }
}
