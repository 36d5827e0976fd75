namespace Scorer.Store;

/// <summary>
/// The prediction log: scored rows written in batches (by <see cref="PredictionLog"/>), read back by id or range, and
/// counted.
/// </summary>
public interface IPredictionLogStore
{
    /// <summary>
    /// Writes a batch of predictions in one transaction. An id already stored or repeated in the batch throws
    /// <see cref="InvalidOperationException"/> naming it; a NaN or infinite η or probability throws
    /// <see cref="ArgumentException"/> naming the field; either way nothing of the batch is written.
    /// Doubles round-trip bit for bit; times come back in UTC at the store's precision (SQLite: microseconds).
    /// </summary>
    Task WritePredictionsAsync(IReadOnlyList<PredictionRecord> batch, CancellationToken cancellationToken = default);

    /// <summary>
    /// True when <paramref name="error"/>, thrown by <see cref="WritePredictionsAsync"/>, says the store refused what
    /// the rows hold (a value it cannot keep, a broken rule such as a repeated id): writing the same rows again cannot
    /// succeed. False for a failure that may pass (the store unreachable, a timeout, a full disk). The prediction log
    /// sets refused rows aside instead of retrying them forever.
    /// </summary>
    bool IsRefusal(Exception error) => error is ArgumentException or PredictionRefusedException;

    Task<PredictionRecord?> GetPredictionAsync(Guid id, CancellationToken cancellationToken = default);

    /// <summary>The predictions of a model (optionally one version) scored in [from, to), in time order.</summary>
    Task<IReadOnlyList<PredictionRecord>> GetPredictionsAsync(string model, string? version, DateTimeOffset from, DateTimeOffset to, CancellationToken cancellationToken = default);

    Task<long> CountPredictionsAsync(string model, string? version = null, CancellationToken cancellationToken = default);

    /// <summary>
    /// Predictions of a model version scored in [from, to), counted by whole minutes of scoring time: a minute counts
    /// when it starts inside the range. Kept beside the log, so this never scans it.
    /// </summary>
    Task<long> CountPredictionsByMinuteAsync(string model, string version, DateTimeOffset from, DateTimeOffset to, CancellationToken cancellationToken = default);
}
