using Microsoft.Extensions.DependencyInjection;

namespace Scorer.Store;

/// <summary>What every driver's <c>Add…Store</c> extension registers the same way.</summary>
public static class StoreServices
{
    /// <summary>
    /// Registers the store <paramref name="create"/> makes as one singleton of <typeparamref name="TStore"/>, and the same
    /// instance as <see cref="IScorerStore"/> and as each narrow contract (<see cref="IStageStore"/>,
    /// <see cref="IPredictionLogStore"/>, <see cref="IOutcomeStore"/>, <see cref="ILabelledStore"/>,
    /// <see cref="IDriftCountStore"/>, <see cref="ILeaseStore"/>, <see cref="ISummaryStore"/>). A store is registered once: a second throws
    /// <see cref="InvalidOperationException"/>.
    /// </summary>
    public static IServiceCollection AddStore<TStore>(IServiceCollection services, Func<IServiceProvider, TStore> create)
        where TStore : class, IScorerStore
    {
        ArgumentNullException.ThrowIfNull(services);
        ArgumentNullException.ThrowIfNull(create);
        if (services.Any(s => s.ServiceType == typeof(IScorerStore)))
        {
            throw new InvalidOperationException($"A store is registered already; register one store only (not also {typeof(TStore).Name}).");
        }

        services.AddSingleton(create);
        services.AddSingleton<IScorerStore>(sp => sp.GetRequiredService<TStore>());
        services.AddSingleton<IStageStore>(sp => sp.GetRequiredService<TStore>());
        services.AddSingleton<IPredictionLogStore>(sp => sp.GetRequiredService<TStore>());
        services.AddSingleton<IOutcomeStore>(sp => sp.GetRequiredService<TStore>());
        services.AddSingleton<ILabelledStore>(sp => sp.GetRequiredService<TStore>());
        services.AddSingleton<IDriftCountStore>(sp => sp.GetRequiredService<TStore>());
        services.AddSingleton<ILeaseStore>(sp => sp.GetRequiredService<TStore>());
        services.AddSingleton<ISummaryStore>(sp => sp.GetRequiredService<TStore>());
        return services;
    }
}
