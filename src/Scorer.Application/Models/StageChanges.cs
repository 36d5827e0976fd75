using Scorer.Registry;
using Scorer.Store;

namespace Scorer.Application.Models;

/// <summary>
/// Stage changes for every transport: setting a version's stage, rolling a model back to its previous live version,
/// and the history, with the registry's refusals turned into the one error shape (not found, or not possible now).
/// </summary>
public sealed class StageChanges(ModelCatalog catalog, ModelRegistry registry, IStageStore store)
{
    /// <summary>Moves the named version to <paramref name="stage"/> (live, shadow or retired) on behalf of <paramref name="actor"/>.</summary>
    public Task<IReadOnlyList<StageChange>> SetAsync(string? model, string? version, string? stage, string actor, CancellationToken cancellationToken)
    {
        var to = ModelCatalog.ParseStage(stage);
        var found = catalog.Version(model, version);
        return Guard(() => registry.SetStageAsync(found.Model, found.Version, to, actor, cancellationToken));
    }

    /// <summary>Makes the model's previous live version live again.</summary>
    public Task<IReadOnlyList<StageChange>> RollbackAsync(string? model, string actor, CancellationToken cancellationToken)
    {
        var entry = catalog.Model(model);
        return Guard(() => registry.RollbackAsync(entry.Name, actor, cancellationToken));
    }

    /// <summary>The model's stage history, oldest first.</summary>
    public Task<IReadOnlyList<StageChange>> HistoryAsync(string? model, CancellationToken cancellationToken) =>
        store.GetHistoryAsync(catalog.Model(model).Name, cancellationToken);

    /// <summary>The live version of the model after a change, or null.</summary>
    public string? Live(string model) => catalog.Current.Find(model)?.Live?.Version;

    private static async Task<T> Guard<T>(Func<Task<T>> action)
    {
        try
        {
            return await action().ConfigureAwait(false);
        }
        catch (RegistryException ex)
        {
            throw ex.NotFound ? Errors.NotFound(ex.Field, ex.Reason) : Errors.Precondition(ex.Field, ex.Reason);
        }
    }
}
