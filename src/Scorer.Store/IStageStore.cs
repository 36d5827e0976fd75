namespace Scorer.Store;

/// <summary>
/// Model versions, their stages and the history of stage changes: what the registry keeps in the store.
/// </summary>
public interface IStageStore
{
    /// <summary>Every model version known to the store, with its stage.</summary>
    Task<IReadOnlyList<ModelVersionRecord>> GetVersionsAsync(CancellationToken cancellationToken = default);

    /// <summary>
    /// Records a newly loaded version with its initial stage and a history entry (From = null), unless the store knows
    /// it already; returns the stored record (the existing one when known, whose stage wins over <paramref name="version"/>'s).
    /// </summary>
    Task<ModelVersionRecord> AddVersionAsync(ModelVersionRecord version, string actor, CancellationToken cancellationToken = default);

    /// <summary>
    /// Applies stage changes atomically (all or none), in order, each also appended to the history. An unknown
    /// (model, version), or a <see cref="StageChange.From"/> that is not the stored stage, throws
    /// <see cref="InvalidOperationException"/> naming it, and nothing changes; a null From applies from the stored stage.
    /// </summary>
    Task ChangeStagesAsync(IReadOnlyList<StageChange> changes, CancellationToken cancellationToken = default);

    /// <summary>The stage history of a model, oldest first.</summary>
    Task<IReadOnlyList<StageChange>> GetHistoryAsync(string model, CancellationToken cancellationToken = default);
}
