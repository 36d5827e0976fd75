namespace Scorer.Store;

/// <summary>Drift counts: rows of a version per hour, drift series and bin.</summary>
public interface IDriftCountStore
{
    /// <summary>Adds drift counts (summed with what is stored for the same model, version, hour, series and bin).</summary>
    Task AddDriftCountsAsync(IReadOnlyList<DriftCount> counts, CancellationToken cancellationToken = default);

    /// <summary>The drift counts of a model version for the hours starting in [from, to), summed over the hours, by series and bin.</summary>
    Task<IReadOnlyList<DriftCount>> GetDriftCountsAsync(string model, string version, DateTimeOffset from, DateTimeOffset to,
        CancellationToken cancellationToken = default);
}
