namespace Scorer.Store;

/// <summary>
/// One stored bucket of a version's labelled summaries: the segment ("" for the whole version), the bucket of
/// prediction time [Start, Start + Length), the opaque summary document, and the revision of the save that last wrote it.
/// </summary>
public sealed record StoredSummary(string Segment, DateTimeOffset Start, TimeSpan Length, byte[] Summary, long Revision);

/// <summary>How far a version's summaries have taken in the labelled change feed, and the revision of the last save.</summary>
public sealed record SummaryState(long Cursor, long Revision);

/// <summary>
/// The monitor's labelled summaries (docs/monitoring.md "Summaries"): written by the holder of a lease, read by every
/// replica, so every replica reports from the same summaries and a restart reads summaries, not rows.
/// </summary>
public interface ISummaryStore
{
    /// <summary>The state of a version's summaries, or null when none was saved.</summary>
    Task<SummaryState?> GetSummaryStateAsync(string model, string version, CancellationToken cancellationToken = default);

    /// <summary>
    /// Every bucket of a version's summaries with its revision, and, for the buckets written after
    /// <paramref name="afterRevision"/>, the summary document (an empty array for the others): a reader that keeps the
    /// documents it has reads only what changed, and learns which buckets are gone.
    /// </summary>
    Task<IReadOnlyList<StoredSummary>> GetSummariesAsync(string model, string version, long afterRevision, CancellationToken cancellationToken = default);

    /// <summary>
    /// In one transaction, only while this instance holds <paramref name="lease"/> (else <see cref="LeaseLostException"/>
    /// and nothing is written): writes the buckets <paramref name="upserts"/> (inserted or replaced, with revision
    /// <paramref name="revision"/>), deletes the buckets starting at <paramref name="deletes"/> (segment and start), and
    /// saves the state (<paramref name="cursor"/>, <paramref name="revision"/>).
    /// </summary>
    Task SaveSummariesAsync(string model, string version, long cursor, long revision, IReadOnlyList<StoredSummary> upserts,
        IReadOnlyList<(string Segment, DateTimeOffset Start)> deletes, string lease, CancellationToken cancellationToken = default);
}
