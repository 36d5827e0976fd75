using Microsoft.Extensions.DependencyInjection.Extensions;
using Microsoft.Extensions.Hosting;
using Scorer.Store;
using Scorer.Store.Sqlite;

// ReSharper disable once CheckNamespace
namespace Microsoft.Extensions.DependencyInjection;

/// <summary>Registers the SQLite store.</summary>
public static class SqliteStoreServiceCollectionExtensions
{
    /// <summary>
    /// Registers the SQLite store over the file at <paramref name="path"/> (created with its folder when missing) as
    /// <see cref="SqliteScorerStore"/>, <see cref="IScorerStore"/>, each narrow store contract,
    /// <see cref="IStoreSpaceSignal"/> and <see cref="IStoreMemorySignal"/>, one instance for all, on the container's <see cref="TimeProvider"/> (the system
    /// clock unless one is registered); and, as a hosted service, its closing once the host has stopped (after every
    /// other hosted service, so that the prediction log drains into it first), after the retention loop when
    /// <see cref="SqliteStoreOptions.PredictionRetention"/> is set (every <see cref="SqliteStoreOptions.PruneInterval"/>,
    /// in the holder of the retention lease); with <see cref="RetentionCounters"/>, one for the process, counting
    /// what the retention did.
    /// </summary>
    /// <param name="services">The container.</param>
    /// <param name="path">The database file.</param>
    /// <param name="options">The store's settings (size limit, lease duration, retention); the defaults when null.</param>
    public static IServiceCollection AddSqliteStore(this IServiceCollection services, string path, SqliteStoreOptions? options = null)
    {
        ArgumentNullException.ThrowIfNull(services);
        ArgumentException.ThrowIfNullOrWhiteSpace(path);
        options ??= new SqliteStoreOptions();
        services.TryAddSingleton(TimeProvider.System);
        StoreServices.AddStore(services, sp => SqliteScorerStore.ForFile(path, options, sp.GetRequiredService<TimeProvider>()));
        services.AddSingleton<IStoreSpaceSignal>(sp => sp.GetRequiredService<SqliteScorerStore>());
        services.AddSingleton<IStoreMemorySignal>(sp => sp.GetRequiredService<SqliteScorerStore>());
        services.AddSingleton<IRetentionStore>(sp => sp.GetRequiredService<SqliteScorerStore>());
        services.TryAddSingleton<RetentionCounters>();
        services.AddSingleton<IHostedService, SqliteStoreHost>();
        return services;
    }
}
