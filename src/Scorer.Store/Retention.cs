using System.Globalization;

namespace Scorer.Store;

/// <summary>
/// A store that applies a retention to its raw rows: the prediction log, the outcomes and the outcome conflicts. The
/// per-minute counts, the drift counts, the labelled summaries and the registry's tables are never pruned.
/// </summary>
public interface IRetentionStore
{
    /// <summary>
    /// One pass of the retention as of <paramref name="now"/>: what has left the store's retention is removed, except
    /// a prediction whose outcome is still expected (see the driver for how it decides and how it removes). Nothing
    /// when the store keeps everything (no retention set). Passes must not run side by side: the drivers' hosts run
    /// them in the holder of the lease <see cref="RetentionRules.LeaseName"/> only.
    /// </summary>
    Task<PruneResult> PruneAsync(DateTimeOffset now, CancellationToken cancellationToken = default);
}

/// <summary>
/// What one <see cref="IRetentionStore.PruneAsync"/> pass did: <see cref="PredictionsDeleted"/> predictions removed
/// from the log, <see cref="KeptAwaitingOutcome"/> predictions past the retention kept because their outcome is still
/// expected, <see cref="OutcomesDeleted"/> outcomes and <see cref="ConflictsDeleted"/> outcome conflicts removed.
/// </summary>
public sealed record PruneResult(long PredictionsDeleted, long KeptAwaitingOutcome, long OutcomesDeleted = 0, long ConflictsDeleted = 0)
{
    /// <summary>Nothing done.</summary>
    public static PruneResult None { get; } = new(0, 0);

    /// <summary>PostgreSQL: partitions dropped whole (predictions and outcomes together).</summary>
    public int PartitionsDropped { get; init; }

    /// <summary>PostgreSQL: partitions created (ahead of time, or to take a day's rows out of the default partition).</summary>
    public int PartitionsCreated { get; init; }

    /// <summary>SQLite: the delete transactions the pass ran.</summary>
    public int Batches { get; init; }

    /// <summary>SQLite: the longest of those transactions, from BEGIN IMMEDIATE to COMMIT.</summary>
    public TimeSpan LongestBatch { get; init; }
}

/// <summary>
/// What the retention has done since the process started, summed over its passes, for metrics: one instance per
/// process, registered as a singleton by each driver's <c>Add…Store</c> and updated by its host's retention loop.
/// Every member is safe to read from any thread at any time.
/// </summary>
public sealed class RetentionCounters
{
    private long _passes;
    private long _failedPasses;
    private long _predictionsDeleted;
    private long _outcomesDeleted;
    private long _conflictsDeleted;
    private long _partitionsDropped;
    private long _partitionsCreated;
    private long _batches;
    private long _keptAwaitingOutcome;
    private long _longestBatchTicks;
    private long _lastPassUnixMs = -1;

    /// <summary>Passes that completed.</summary>
    public long Passes => Interlocked.Read(ref _passes);

    /// <summary>Passes that failed (retried at the next interval).</summary>
    public long FailedPasses => Interlocked.Read(ref _failedPasses);

    /// <summary>Predictions removed, in all.</summary>
    public long PredictionsDeleted => Interlocked.Read(ref _predictionsDeleted);

    /// <summary>Outcomes removed, in all.</summary>
    public long OutcomesDeleted => Interlocked.Read(ref _outcomesDeleted);

    /// <summary>Outcome conflicts removed, in all.</summary>
    public long ConflictsDeleted => Interlocked.Read(ref _conflictsDeleted);

    /// <summary>PostgreSQL: partitions dropped, in all.</summary>
    public long PartitionsDropped => Interlocked.Read(ref _partitionsDropped);

    /// <summary>PostgreSQL: partitions created, in all.</summary>
    public long PartitionsCreated => Interlocked.Read(ref _partitionsCreated);

    /// <summary>SQLite: delete transactions run, in all.</summary>
    public long Batches => Interlocked.Read(ref _batches);

    /// <summary>A gauge: the predictions past the retention kept awaiting their outcome, as the last completed pass counted them.</summary>
    public long KeptAwaitingOutcome => Interlocked.Read(ref _keptAwaitingOutcome);

    /// <summary>SQLite: the longest delete transaction of any pass since start.</summary>
    public TimeSpan LongestBatch => TimeSpan.FromTicks(Interlocked.Read(ref _longestBatchTicks));

    /// <summary>When the last pass completed (the host's clock), or null before the first.</summary>
    public DateTimeOffset? LastPass => Interlocked.Read(ref _lastPassUnixMs) is var ms and >= 0 ? DateTimeOffset.FromUnixTimeMilliseconds(ms) : null;

    /// <summary>Adds a completed pass.</summary>
    public void Completed(PruneResult result, DateTimeOffset at)
    {
        ArgumentNullException.ThrowIfNull(result);
        Interlocked.Add(ref _predictionsDeleted, result.PredictionsDeleted);
        Interlocked.Add(ref _outcomesDeleted, result.OutcomesDeleted);
        Interlocked.Add(ref _conflictsDeleted, result.ConflictsDeleted);
        Interlocked.Add(ref _partitionsDropped, result.PartitionsDropped);
        Interlocked.Add(ref _partitionsCreated, result.PartitionsCreated);
        Interlocked.Add(ref _batches, result.Batches);
        Interlocked.Exchange(ref _keptAwaitingOutcome, result.KeptAwaitingOutcome);
        var ticks = result.LongestBatch.Ticks;
        for (var seen = Interlocked.Read(ref _longestBatchTicks); ticks > seen; seen = Interlocked.Read(ref _longestBatchTicks))
        {
            if (Interlocked.CompareExchange(ref _longestBatchTicks, ticks, seen) == seen)
            {
                break;
            }
        }

        Interlocked.Exchange(ref _lastPassUnixMs, at.ToUnixTimeMilliseconds());
        Interlocked.Increment(ref _passes);
    }

    /// <summary>Adds a failed pass.</summary>
    public void Failed() => Interlocked.Increment(ref _failedPasses);
}

/// <summary>The retention settings' checks, the same for every driver.</summary>
public static class RetentionRules
{
    /// <summary>The lease under which a process runs the retention passes (<see cref="ILeaseStore.TryHoldLeaseAsync"/>).</summary>
    public const string LeaseName = "retention";

    /// <summary>The prune interval unless set: an hour.</summary>
    public static readonly TimeSpan DefaultPruneInterval = TimeSpan.FromHours(1);

    /// <summary>
    /// What is wrong with a set of retention settings, each problem naming the setting (<paramref name="prefix"/> then
    /// its name, e.g. <c>Scorer:Store:</c>): a retention that is not positive; an outcome retention without a prediction
    /// retention or shorter than it (an outcome must outlive its prediction: a prediction whose outcome was gone would
    /// pass for one still awaiting it); an interval that is not positive.
    /// </summary>
    public static IEnumerable<string> Problems(TimeSpan? predictionRetention, TimeSpan? outcomeRetention, TimeSpan pruneInterval, string prefix = "")
    {
        if (predictionRetention is { } p && p <= TimeSpan.Zero)
        {
            yield return $"{prefix}PredictionRetention is {p}; it must be positive (or unset to keep predictions forever).";
        }

        if (outcomeRetention is { } o)
        {
            if (o <= TimeSpan.Zero)
            {
                yield return $"{prefix}OutcomeRetention is {o}; it must be positive (or unset to keep outcomes forever).";
            }
            else if (predictionRetention is null)
            {
                yield return $"{prefix}OutcomeRetention is {o} but {prefix}PredictionRetention is unset (predictions kept forever); "
                    + $"{prefix}OutcomeRetention must be at least {prefix}PredictionRetention: set both, or neither.";
            }
            else if (o < predictionRetention.Value)
            {
                yield return $"{prefix}OutcomeRetention is {o}, shorter than {prefix}PredictionRetention ({predictionRetention.Value}); "
                    + $"{prefix}OutcomeRetention must be at least {prefix}PredictionRetention (an outcome is kept as long as its prediction, or longer).";
            }
        }

        if (pruneInterval <= TimeSpan.Zero)
        {
            yield return string.Create(CultureInfo.InvariantCulture, $"{prefix}PruneInterval is {pruneInterval}; it must be positive.");
        }
    }

    /// <summary>Throws <see cref="ArgumentException"/> (for <paramref name="paramName"/>) with the first of <see cref="Problems"/>, if any.</summary>
    public static void Check(TimeSpan? predictionRetention, TimeSpan? outcomeRetention, TimeSpan pruneInterval, string paramName)
    {
        if (Problems(predictionRetention, outcomeRetention, pruneInterval).FirstOrDefault() is { } problem)
        {
            throw new ArgumentException(problem, paramName);
        }
    }
}
