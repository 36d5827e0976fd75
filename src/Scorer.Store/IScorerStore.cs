namespace Scorer.Store;

/// <summary>Where a model version stands.</summary>
public enum Stage
{
    /// <summary>Answers score requests.</summary>
    Live,

    /// <summary>Scores every row beside the live version, off the request path; its results are logged, not returned.</summary>
    Shadow,

    /// <summary>Loaded but not used.</summary>
    Retired,
}

/// <summary>A model version the registry has loaded: its file's hash and its current stage.</summary>
public sealed record ModelVersionRecord(string Model, string Version, string FileSha256, DateTimeOffset LoadedAt, Stage Stage);

/// <summary>One stage change: who moved which version from where to where, and when. <see cref="From"/> is null for the first stage.</summary>
public sealed record StageChange(string Model, string Version, Stage? From, Stage To, string Actor, DateTimeOffset At);

/// <summary>One scored row as logged: <see cref="FeaturesJson"/> holds the row's feature values as a JSON object.</summary>
public sealed record PredictionRecord(
    Guid Id,
    string Model,
    string Version,
    Stage Stage,
    DateTimeOffset ScoredAt,
    string? Key,
    double Eta,
    double Probability,
    string FeaturesJson,
    Guid? LiveId = null);

/// <summary>An outcome as a caller reports it: for a prediction id, or for every prediction carrying a business key.</summary>
public sealed record OutcomeReport(Guid? Id, string? Key, byte Outcome, DateTimeOffset? ObservedAt = null);

/// <summary>What happens when a report disagrees with an outcome already recorded for the prediction.</summary>
public enum ConflictPolicy
{
    /// <summary>The first outcome stays; the report is listed as a conflict.</summary>
    KeepFirst,

    /// <summary>The reported outcome replaces the recorded one; the report is still listed as a conflict.</summary>
    TakeLatest,
}

/// <summary>
/// The answer to a batch of reports. <see cref="Accepted"/> counts reports that labelled at least one prediction anew;
/// <see cref="Duplicates"/> reports whose outcome was already recorded; <see cref="Unknown"/> the ids or keys with no
/// prediction of the model; <see cref="Conflicts"/> the ids or keys whose recorded outcome differed.
/// </summary>
public sealed record OutcomeReceipt(int Accepted, int Duplicates, IReadOnlyList<string> Unknown, IReadOnlyList<string> Conflicts);

/// <summary>
/// Rows of a model version scored in one hour that fell in one bin of one drift series: <c>score</c> (the linear
/// predictor) or <c>feature:NAME</c>, binned against the model file's baseline.
/// </summary>
public sealed record DriftCount(string Model, string Version, DateTimeOffset Hour, string Series, int Bin, long Rows);

/// <summary>A labelled prediction with the row it scored, for exporting labelled rows to a refit.</summary>
public sealed record LabelledRow(LabelledPrediction Prediction, string? Key, string FeaturesJson)
{
    /// <summary>Where this row stands in the export order: pass it as the start of the next page.</summary>
    public LabelledRowPosition Position => new(Prediction.ScoredAt, Prediction.Id);
}

/// <summary>A place in the export order of labelled rows (prediction time, then id): a page starts after it.</summary>
public readonly record struct LabelledRowPosition(DateTimeOffset ScoredAt, Guid Id);

/// <summary>A live prediction and the shadow prediction of the same row, with their outcome.</summary>
public sealed record PairedOutcome(double LiveProbability, double ShadowProbability, byte Outcome);

/// <summary>A prediction with its outcome, as the monitor reads it.</summary>
public sealed record LabelledPrediction(Guid Id, string Version, Stage Stage, DateTimeOffset ScoredAt, double Eta, double Probability, byte Outcome, bool Implicit,
    DateTimeOffset RecordedAt);

/// <summary>A labelled prediction reduced to what the monitor's statistics need, as the monitor's row cache keeps it.</summary>
public readonly record struct LabelledPoint(Guid Id, DateTimeOffset ScoredAt, double Probability, byte Outcome);

/// <summary>
/// What changed in a version's labelled predictions since a cursor: every prediction whose outcome was recorded or
/// changed, in the order of the changes (a prediction may appear twice; the later entry is its outcome now), and the
/// cursor to pass next time.
/// </summary>
public sealed record LabelledChanges(IReadOnlyList<LabelledPoint> Points, long Cursor);

/// <summary>A lease this instance relied on is held by another instance now (or by nobody); the work it guarded must stop.</summary>
public sealed class LeaseLostException(string lease) : Exception($"The lease '{lease}' is no longer held by this instance.")
{
    public string Lease { get; } = lease;
}

/// <summary>
/// The service's durable state. Every implementation (SQLite now, PostgreSQL later) passes the same contract tests.
/// Methods are safe to call concurrently. Times are stored with at least millisecond precision, in UTC.
/// </summary>
public interface IScorerStore : IAsyncDisposable
{
    /// <summary>Creates or upgrades the schema (numbered migrations, applied in order, once each).</summary>
    Task MigrateAsync(CancellationToken cancellationToken = default);

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

    /// <summary>Adds drift counts (summed with what is stored for the same model, version, hour, series and bin).</summary>
    Task AddDriftCountsAsync(IReadOnlyList<DriftCount> counts, CancellationToken cancellationToken = default);

    /// <summary>The drift counts of a model version for the hours starting in [from, to), summed over the hours, by series and bin.</summary>
    Task<IReadOnlyList<DriftCount>> GetDriftCountsAsync(string model, string version, DateTimeOffset from, DateTimeOffset to,
        CancellationToken cancellationToken = default);

    /// <summary>
    /// Labelled live predictions of <paramref name="liveVersion"/> scored in [from, to) paired with the labelled shadow
    /// predictions of <paramref name="shadowVersion"/> made for the same rows, in prediction-time order.
    /// </summary>
    Task<IReadOnlyList<PairedOutcome>> GetPairedAsync(string model, string liveVersion, string shadowVersion, DateTimeOffset from, DateTimeOffset to,
        CancellationToken cancellationToken = default);

    /// <summary>
    /// One page of the labelled predictions of a model (optionally one version) scored in [from, to) with their logged
    /// rows: at most <paramref name="limit"/> rows in prediction-time order (then id, in the store's order of ids, the
    /// order of <see cref="GetLabelledAsync"/>), the first ones after <paramref name="after"/> (null: from the start).
    /// Pass the <see cref="LabelledRow.Position"/> of a page's last row to get the next page; a page shorter than the
    /// limit is the last. Each page is one short read, so an export of any size holds no connection, lock or read
    /// snapshot between its pages; an outcome recorded during an export shows if its row comes after the page reached.
    /// </summary>
    Task<IReadOnlyList<LabelledRow>> GetLabelledRowsAsync(string model, string? version, DateTimeOffset from, DateTimeOffset to, LabelledRowPosition? after,
        int limit, CancellationToken cancellationToken = default);

    /// <summary>
    /// The labelled predictions of a model version recorded or changed after <paramref name="cursor"/> (0: from the
    /// beginning), with the cursor to pass next time. Never skips a committed change, whichever process or replica made
    /// it and however long its transaction took: a reader that passes each returned cursor back sees every change once
    /// or more, and the last time it sees a prediction it sees its current outcome.
    /// </summary>
    Task<LabelledChanges> GetLabelledChangesAsync(string model, string version, long cursor, CancellationToken cancellationToken = default);

    /// <summary>
    /// Tries to take, or confirms this instance still holds, the named lease: the right to run work that must run in one
    /// process only among all that share the store (the monitor's CUSUM charts). True while this instance holds it. A
    /// lease is held until <see cref="ReleaseLeaseAsync"/>, disposal, or the holder's death (then another instance's next
    /// try takes it). A store that only one process uses may grant it always.
    /// </summary>
    Task<bool> TryHoldLeaseAsync(string name, CancellationToken cancellationToken = default);

    /// <summary>Gives the named lease up, if this instance holds it.</summary>
    Task ReleaseLeaseAsync(string name, CancellationToken cancellationToken = default);

    /// <summary>
    /// Saves the state of a version's charts (an opaque document), only while this instance holds the lease
    /// <paramref name="lease"/>: a holder that has lost it gets <see cref="LeaseLostException"/> and nothing is written,
    /// so a new holder's state is never overwritten by an old one.
    /// </summary>
    Task SaveChartStateAsync(string model, string version, string state, string lease, CancellationToken cancellationToken = default);

    /// <summary>The last saved state of a version's charts, or null.</summary>
    Task<string?> GetChartStateAsync(string model, string version, CancellationToken cancellationToken = default);

    /// <summary>The labelled predictions of a model (optionally one version) scored in [from, to), in prediction-time order (then id).</summary>
    Task<IReadOnlyList<LabelledPrediction>> GetLabelledAsync(string model, string? version, DateTimeOffset from, DateTimeOffset to,
        CancellationToken cancellationToken = default);
}

/// <summary>
/// A store shared by several processes that can tell each of them at once when one of them changed the stages
/// (PostgreSQL: LISTEN/NOTIFY). Stores without it are polled (every registry rescan).
/// </summary>
public interface IStageChangeSignal
{
    /// <summary>
    /// Calls <paramref name="changed"/> (on a background thread, with the model's name) each time any process sharing
    /// the store commits a stage change, until cancelled. Reconnects after a lost connection, and then calls
    /// <paramref name="changed"/> with null, since changes may have been missed meanwhile.
    /// </summary>
    Task ListenForStageChangesAsync(Action<string?> changed, CancellationToken cancellationToken);
}
