namespace Scorer.Store;

/// <summary>
/// Labelled predictions (a prediction with its outcome) as the monitor and the export read them: by range, as a change
/// feed, as pages of rows with their features, and as live and shadow pairs.
/// </summary>
public interface ILabelledStore
{
    /// <summary>The labelled predictions of a model (optionally one version) scored in [from, to), in prediction-time order (then id).</summary>
    Task<IReadOnlyList<LabelledPrediction>> GetLabelledAsync(string model, string? version, DateTimeOffset from, DateTimeOffset to,
        CancellationToken cancellationToken = default);

    /// <summary>
    /// The labelled predictions of a model version recorded or changed after <paramref name="cursor"/> (0: from the
    /// beginning), with the cursor to pass next time. Never skips a committed change, whichever process or replica made
    /// it and however long its transaction took: a reader that passes each returned cursor back sees every change once
    /// or more, and the last time it sees a prediction it sees its current outcome. With a <paramref name="limit"/>, one
    /// page: the changes of the first transactions after the cursor up to and including the one holding the limit-th
    /// change (a transaction's changes are never split), so a reader far behind catches up page by page.
    /// </summary>
    Task<LabelledChanges> GetLabelledChangesAsync(string model, string version, long cursor, int? limit = null, CancellationToken cancellationToken = default);

    /// <summary>
    /// The labelled predictions of a model version scored in [from, to) as the change feed had given them up to
    /// <paramref name="cursor"/> (a cursor the feed returned): the rows whose last change the feed delivered before that
    /// cursor, with their current outcome. A summary rebuilt from them and then brought forward by the feed from the
    /// same cursor counts every row once.
    /// </summary>
    Task<IReadOnlyList<LabelledPoint>> GetLabelledUpToAsync(string model, string version, DateTimeOffset from, DateTimeOffset to, long cursor,
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
    /// Labelled live predictions of <paramref name="liveVersion"/> scored in [from, to) paired with the labelled shadow
    /// predictions of <paramref name="shadowVersion"/> made for the same rows, in prediction-time order. With
    /// <paramref name="latest"/>, only the latest that many pairs of the range (read newest first along the outcomes'
    /// time index, so the cost follows the limit, not the range).
    /// </summary>
    Task<IReadOnlyList<PairedOutcome>> GetPairedAsync(string model, string liveVersion, string shadowVersion, DateTimeOffset from, DateTimeOffset to,
        int? latest = null, CancellationToken cancellationToken = default);
}
