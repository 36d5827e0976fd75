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

/// <summary>
/// A labelled prediction reduced to what the monitor's statistics need, as the monitor's row cache keeps it. Revised:
/// its outcome was changed after it was first recorded (so a reader of the change feed may have seen it before, with
/// the other outcome).
/// </summary>
public readonly record struct LabelledPoint(Guid Id, DateTimeOffset ScoredAt, double Probability, byte Outcome, bool Revised = false);

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
/// The service's durable state: the union of the narrow contracts below, with the schema's migration and disposal.
/// Every implementation (SQLite, PostgreSQL) passes the same contract tests. Methods are safe to call concurrently.
/// Times are stored with at least millisecond precision, in UTC (see <see cref="StoreTime"/>).
/// </summary>
/// <remarks>
/// Consumers take the narrow contract they use: <see cref="IStageStore"/> (versions, stages, history),
/// <see cref="IPredictionLogStore"/> (the prediction log), <see cref="IOutcomeStore"/> (outcomes and implicit negatives),
/// <see cref="ILabelledStore"/> (labelled predictions, their change feed, the export, shadow pairs),
/// <see cref="IDriftCountStore"/> (drift counts) and <see cref="ILeaseStore"/> (leases and the charts' saved state).
/// A driver's <c>Add…Store</c> extension registers one instance as this interface and as each of those.
/// </remarks>
public interface IScorerStore : IStageStore, IPredictionLogStore, IOutcomeStore, ILabelledStore, IDriftCountStore, ILeaseStore, ISummaryStore, IAsyncDisposable
{
    /// <summary>Creates or upgrades the schema (numbered migrations, applied in order, once each).</summary>
    Task MigrateAsync(CancellationToken cancellationToken = default);
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
