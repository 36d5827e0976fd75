using Microsoft.Extensions.DependencyInjection.Extensions;
using Microsoft.Extensions.Hosting;
using Scorer.Store;
using Scorer.Store.Postgres;

// ReSharper disable once CheckNamespace
namespace Microsoft.Extensions.DependencyInjection;

/// <summary>Registers the PostgreSQL store.</summary>
public static class PostgresStoreServiceCollectionExtensions
{
    /// <summary>
    /// Registers the PostgreSQL store over the database <paramref name="connectionString"/> names as
    /// <see cref="PostgresScorerStore"/>, <see cref="IScorerStore"/>, each narrow store contract and
    /// <see cref="IStageChangeSignal"/> (stage changes announced by LISTEN/NOTIFY), one instance for all, on the
    /// container's <see cref="TimeProvider"/> (the system clock unless one is registered); and, as a hosted service,
    /// its background work: the daily partitions made ahead and, when <see cref="PostgresStoreOptions.PredictionRetention"/>
    /// is set, the retention (every <see cref="PostgresStoreOptions.PruneInterval"/>, in the holder of the retention
    /// lease), counted in <see cref="RetentionCounters"/> (one for the process), and the store's closing once the host has stopped.
    /// </summary>
    /// <param name="services">The container.</param>
    /// <param name="connectionString">An Npgsql connection string.</param>
    /// <param name="options">The schema, the retention; the defaults when null.</param>
    public static IServiceCollection AddPostgresStore(this IServiceCollection services, string connectionString, PostgresStoreOptions? options = null)
    {
        ArgumentNullException.ThrowIfNull(services);
        ArgumentException.ThrowIfNullOrWhiteSpace(connectionString);
        options ??= new PostgresStoreOptions();
        services.TryAddSingleton(TimeProvider.System);
        StoreServices.AddStore(services, sp => PostgresScorerStore.ForConnectionString(connectionString, options, sp.GetRequiredService<TimeProvider>()));
        services.AddSingleton<IStageChangeSignal>(sp => sp.GetRequiredService<PostgresScorerStore>());
        services.AddSingleton<IRetentionStore>(sp => sp.GetRequiredService<PostgresScorerStore>());
        services.TryAddSingleton<RetentionCounters>();
        services.AddSingleton<IHostedService, PostgresStoreHost>();
        return services;
    }
}
