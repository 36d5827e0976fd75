using Scorer.Store.Postgres;
using Xunit.Abstractions;

namespace Scorer.Store.Tests;

/// <summary>
/// The contract, on a real PostgreSQL server (<see cref="PostgresServer"/>), in a fresh schema per test (dropped after):
/// every store a test opens shares that schema, as replicas share a database.
/// </summary>
[RequiresPostgres]
public sealed class PostgresStoreContractTests(ITestOutputHelper output) : StoreContractTests(output)
{
    private readonly string _schema = PostgresServer.NewSchemaName();

    /// <summary>timestamptz keeps microseconds.</summary>
    protected override TimeSpan TimePrecision => TimeSpan.FromMicroseconds(1);

    /// <summary>In a schema that does not exist yet, so every test also proves the store creates it.</summary>
    protected override async Task<IScorerStore> CreateStoreAsync() =>
        PostgresScorerStore.ForConnectionString(await PostgresServer.ConnectionStringAsync(), new PostgresStoreOptions { Schema = _schema });

    protected override async Task<IScorerStore> CreateStoreAsync(TimeSpan? predictionRetention, TimeSpan? outcomeRetention) =>
        PostgresScorerStore.ForConnectionString(await PostgresServer.ConnectionStringAsync(),
            new PostgresStoreOptions { Schema = _schema, PredictionRetention = predictionRetention, OutcomeRetention = outcomeRetention });

    protected override Task DeleteStorageAsync() => PostgresServer.DropSchemaAsync(_schema);

    /// <summary>PostgreSQL text cannot hold U+0000 (SQLSTATE 22021), in a key or in the features.</summary>
    protected override IEnumerable<(string Why, Func<PredictionRecord, PredictionRecord> Spoil)> Refusals() =>
        base.Refusals().Append(("a key holding U+0000", r => r with { Key = "WO-\u00001" }));
}
