namespace Scorer.Store;

/// <summary>
/// Outcomes: reports recorded by the rules of <see cref="OutcomeRules"/>, and implicit negatives for predictions whose
/// horizon passed without one.
/// </summary>
public interface IOutcomeStore
{
    /// <summary>
    /// Records outcomes, durably before returning. A report by id labels that prediction of the model and the shadow
    /// predictions paired with it; a report by key labels every prediction of the model with that key. The same
    /// outcome twice counts once (a duplicate); a different one is a conflict, recorded, and resolved by
    /// <paramref name="policy"/>. All reports of the call are applied in one transaction, in order.
    /// </summary>
    Task<OutcomeReceipt> RecordOutcomesAsync(string model, IReadOnlyList<OutcomeReport> reports, ConflictPolicy policy, DateTimeOffset recordedAt,
        CancellationToken cancellationToken = default);

    /// <summary>
    /// Records a 0 (implicit) for up to <paramref name="limit"/> predictions of the model scored before
    /// <paramref name="maturedBefore"/> that have no outcome, walking the log in the order it was written from where
    /// the last call stopped; returns how many it recorded.
    /// </summary>
    Task<int> RecordImplicitNegativesAsync(string model, DateTimeOffset maturedBefore, DateTimeOffset recordedAt, int limit = 10_000,
        CancellationToken cancellationToken = default);
}
