using Microsoft.Extensions.DependencyInjection;
using Microsoft.Extensions.Hosting;
using Microsoft.Extensions.Logging;
using Microsoft.Extensions.Logging.Abstractions;
using Scorer.Store.Postgres;
using Scorer.Store.Sqlite;

namespace Scorer.Store.Tests;

/// <summary>What each driver's Add…Store registers: one instance behind every contract, its signals, its hosted service.</summary>
public sealed class StoreRegistrationTests : IDisposable
{
    private readonly TempFolder _folder = new();

    public void Dispose() => _folder.Dispose();

    private static readonly Type[] Contracts =
        [typeof(IScorerStore), typeof(IStageStore), typeof(IPredictionLogStore), typeof(IOutcomeStore), typeof(ILabelledStore), typeof(IDriftCountStore), typeof(ILeaseStore)];

    [Fact]
    public async Task The_sqlite_store_is_one_instance_behind_every_contract_and_its_space_signal_and_its_hosted_service_closes_it()
    {
        var services = new ServiceCollection()
            .AddSingleton(typeof(ILogger<>), typeof(NullLogger<>))
            .AddSqliteStore(Path.Combine(_folder.Path, "scorer.db"));
        await using var provider = services.BuildServiceProvider();

        var store = provider.GetRequiredService<SqliteScorerStore>();
        Assert.All(Contracts, contract => Assert.Same(store, provider.GetRequiredService(contract)));
        Assert.Same(store, provider.GetRequiredService<IRetentionStore>());
        Assert.NotNull(provider.GetRequiredService<RetentionCounters>());
        Assert.Same(store, Assert.Single(provider.GetServices<IStoreSpaceSignal>()));
        Assert.Empty(provider.GetServices<IStageChangeSignal>());

        await store.MigrateAsync();
        var hosted = Assert.IsAssignableFrom<IHostedLifecycleService>(Assert.Single(provider.GetServices<IHostedService>()));
        await hosted.StartAsync(CancellationToken.None);
        await hosted.StopAsync(CancellationToken.None);
        Assert.Empty(await store.GetVersionsAsync()); // open until the host has stopped
        await hosted.StoppedAsync(CancellationToken.None);
        await Assert.ThrowsAsync<ObjectDisposedException>(() => store.GetVersionsAsync());
    }

    [Fact]
    public async Task The_postgres_store_is_one_instance_behind_every_contract_and_its_stage_signal_with_its_hosted_service()
    {
        var services = new ServiceCollection()
            .AddSingleton(typeof(ILogger<>), typeof(NullLogger<>))
            .AddPostgresStore("Host=127.0.0.1;Username=postgres", new PostgresStoreOptions { Schema = "registration" });
        await using var provider = services.BuildServiceProvider();

        var store = provider.GetRequiredService<PostgresScorerStore>();
        Assert.All(Contracts, contract => Assert.Same(store, provider.GetRequiredService(contract)));
        Assert.Same(store, Assert.Single(provider.GetServices<IStageChangeSignal>()));
        Assert.Same(store, provider.GetRequiredService<IRetentionStore>());
        Assert.NotNull(provider.GetRequiredService<RetentionCounters>());
        Assert.Empty(provider.GetServices<IStoreSpaceSignal>());
        Assert.IsType<PostgresStoreHost>(Assert.Single(provider.GetServices<IHostedService>()));
        Assert.Equal("registration", store.Options.Schema);
    }

    [Fact]
    public void A_second_store_is_refused()
    {
        var services = new ServiceCollection().AddSqliteStore(Path.Combine(_folder.Path, "scorer.db"));

        var error = Assert.Throws<InvalidOperationException>(() => services.AddPostgresStore("Host=127.0.0.1;Username=postgres"));

        Assert.Contains("A store is registered already", error.Message, StringComparison.Ordinal);
    }

    [Fact]
    public void A_missing_path_or_connection_string_is_refused_naming_it()
    {
        Assert.Equal("path", Assert.ThrowsAny<ArgumentException>(() => new ServiceCollection().AddSqliteStore(" ")).ParamName);
        Assert.Equal("connectionString", Assert.ThrowsAny<ArgumentException>(() => new ServiceCollection().AddPostgresStore("")).ParamName);
    }
}
