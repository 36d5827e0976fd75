using Microsoft.Extensions.Logging;
using Scorer.Registry;
using Scorer.Statistics.Summaries;
using Scorer.Store;

namespace Scorer.Monitor.Reporting;

/// <summary>
/// Keeps every live and shadow version's labelled summaries in the store (docs/monitoring.md "Summaries"): one
/// <see cref="LabelledSummary"/> per bucket of prediction time, an hour long while the predictions are younger than
/// <see cref="MonitorOptions.HourlyBucketsFor"/> and a UTC day long after (hourly buckets are merged into their day
/// once the whole day is that old), brought forward from the labelled change feed page by page. One process does it
/// among all that share the store: the holder of the lease <see cref="Lease"/>; each page's buckets are saved with the
/// feed's cursor in one transaction fenced by the lease, so a new holder continues exactly where the last save left off.
/// </summary>
/// <remarks>
/// A prediction seen in the feed for the first time is added to its bucket. One whose outcome was changed after it was
/// first recorded (<see cref="LabelledPoint.Revised"/>) may already be counted with the other outcome, so its bucket is
/// rebuilt from the store's rows as the feed gave them up to the page's cursor (<see cref="ILabelledStore.GetLabelledUpToAsync"/>),
/// which counts every row of the bucket once. A rebuild needs the bucket's rows, so a changed outcome in a bucket whose
/// older rows were already pruned leaves those rows out of it (outcomes are changed only while their prediction is kept,
/// so this touches at most the bucket at the edge of the outcome retention).
/// </remarks>
public sealed partial class SummaryWriter(ModelRegistry registry, ILeaseStore leases, ILabelledStore labelled, ISummaryStore summaries, MonitorOptions options,
    TimeProvider time, ILogger<SummaryWriter> logger)
{
    /// <summary>The store lease whose holder writes the summaries.</summary>
    public const string Lease = "monitor-summaries";

    private readonly Dictionary<(string Model, string Version), VersionBuckets> _versions = [];
    private bool _holder;

    /// <summary>Whether this process wrote the summaries in its last round.</summary>
    public bool IsHolder => Volatile.Read(ref _holder);

    /// <summary>Runs until cancelled, catching up every <see cref="MonitorOptions.PollInterval"/>.</summary>
    public async Task RunAsync(CancellationToken cancellationToken)
    {
        using var timer = new PeriodicTimer(options.PollInterval, time);
        do
        {
            try
            {
                await CatchUpAsync(cancellationToken).ConfigureAwait(false);
            }
            catch (OperationCanceledException) when (cancellationToken.IsCancellationRequested)
            {
                return;
            }
#pragma warning disable CA1031 // the writer must keep running; the failure is logged and retried at the next tick
            catch (Exception ex)
#pragma warning restore CA1031
            {
                CatchUpFailed(ex);
                _versions.Clear(); // read the stored state again: what this process had may not have been saved
            }
        }
        while (await timer.WaitForNextTickAsync(cancellationToken).ConfigureAwait(false));
    }

    /// <summary>
    /// One round: as the lease holder, every live and shadow version's summaries brought up to the feed's end (at most
    /// <paramref name="maxPages"/> pages each) and saved. Returns the number of feed changes taken in.
    /// </summary>
    public Task<long> CatchUpAsync(CancellationToken cancellationToken = default, int maxPages = 20) =>
        CatchUpAsync([.. registry.Current.Models.Values.SelectMany(m => m.Versions).Where(v => v.Stage != Stage.Retired).Select(v => (v.Model, v.Version))],
            cancellationToken, maxPages);

    /// <summary>One round over the given versions (the registry's live and shadow ones, or a test's).</summary>
    internal async Task<long> CatchUpAsync(IReadOnlyCollection<(string Model, string Version)> versions, CancellationToken cancellationToken, int maxPages = 20)
    {
        var holds = await leases.TryHoldLeaseAsync(Lease, cancellationToken).ConfigureAwait(false);
        if (holds != _holder)
        {
            _versions.Clear(); // a new holder starts from the stored state; a former one forgets what it had
            if (holds)
            {
                BecameHolder(Lease);
            }
        }

        Volatile.Write(ref _holder, holds);
        if (!holds)
        {
            return 0;
        }

        var serving = versions.ToHashSet();
        foreach (var key in _versions.Keys.Where(k => !serving.Contains(k)).ToList())
        {
            _versions.Remove(key);
        }

        long taken = 0;
        try
        {
            foreach (var (model, version) in serving)
            {
                if (!_versions.TryGetValue((model, version), out var buckets))
                {
                    buckets = await VersionBuckets.LoadAsync(summaries, model, version, cancellationToken).ConfigureAwait(false);
                    _versions[(model, version)] = buckets;
                }

                for (var page = 0; page < maxPages; page++)
                {
                    var changes = await labelled.GetLabelledChangesAsync(model, version, buckets.Cursor, options.SummaryPageRows, cancellationToken).ConfigureAwait(false);
                    var changed = await TakeAsync(buckets, model, version, changes, cancellationToken).ConfigureAwait(false);
                    if (!changed && changes.Cursor == buckets.Cursor)
                    {
                        break;
                    }

                    await SaveAsync(buckets, model, version, changes.Cursor, cancellationToken).ConfigureAwait(false);
                    taken += changes.Points.Count;
                    if (changes.Points.Count < options.SummaryPageRows)
                    {
                        break;
                    }
                }
            }
        }
        catch (LeaseLostException)
        {
            LostWhileSaving(Lease);
            _versions.Clear();
            Volatile.Write(ref _holder, false);
        }

        return taken;
    }

    /// <summary>Adds a page's new rows to their buckets, rebuilds the buckets of changed outcomes, merges and prunes old buckets. True when any bucket changed.</summary>
    private async Task<bool> TakeAsync(VersionBuckets buckets, string model, string version, LabelledChanges changes, CancellationToken cancellationToken)
    {
        var now = time.GetUtcNow();
        // Days old enough become day buckets first, so that every row of such a day goes to its day bucket below.
        buckets.MergeDays(now - options.HourlyBucketsFor);
        var rebuild = new HashSet<(DateTimeOffset Start, TimeSpan Length)>();
        foreach (var point in changes.Points)
        {
            var bucket = buckets.BucketOf(point.ScoredAt, now - options.HourlyBucketsFor);
            if (point.Revised)
            {
                rebuild.Add(bucket);
                continue;
            }

            buckets.Open(bucket.Start, bucket.Length).Add(point.Probability, point.Outcome);
        }

        foreach (var (start, length) in rebuild)
        {
            var rows = await labelled.GetLabelledUpToAsync(model, version, start, start + length, changes.Cursor, cancellationToken).ConfigureAwait(false);
            var summary = buckets.Replace(start, length);
            foreach (var row in rows)
            {
                summary.Add(row.Probability, row.Outcome);
            }
        }

        if (options.SummaryRetention is { } retention)
        {
            buckets.DropBefore(now - retention);
        }

        return buckets.HasChanges;
    }

    private async Task SaveAsync(VersionBuckets buckets, string model, string version, long cursor, CancellationToken cancellationToken)
    {
        var (upserts, deletes) = buckets.Changes();
        var revision = buckets.Revision + 1;
        await summaries.SaveSummariesAsync(model, version, cursor, revision, upserts, deletes, Lease, cancellationToken).ConfigureAwait(false);
        buckets.Saved(cursor, revision, upserts);
    }

    [LoggerMessage(EventId = 3106, Level = LogLevel.Error, Message = "The monitor's summaries could not catch up; retrying")]
    private partial void CatchUpFailed(Exception error);

    [LoggerMessage(EventId = 3107, Level = LogLevel.Information, Message = "This process now writes the monitor's summaries (lease {Lease}); continuing from the stored cursor")]
    private partial void BecameHolder(string lease);

    [LoggerMessage(EventId = 3108, Level = LogLevel.Warning, Message = "The lease {Lease} was lost while saving the summaries; another process writes them now")]
    private partial void LostWhileSaving(string lease);

    /// <summary>
    /// One version's buckets as the writer holds them: the stored documents (kept as bytes), the buckets opened since
    /// the last save (dense, to add to), and what to delete. Whole-version segment "" only, for now.
    /// </summary>
    private sealed class VersionBuckets
    {
        private static readonly TimeSpan Hour = TimeSpan.FromHours(1);
        private static readonly TimeSpan Day = TimeSpan.FromDays(1);
        private readonly SortedDictionary<DateTimeOffset, (TimeSpan Length, byte[] Summary)> _stored = [];
        private readonly Dictionary<DateTimeOffset, (TimeSpan Length, LabelledSummary Summary)> _open = [];
        private readonly HashSet<DateTimeOffset> _deleted = [];

        public long Cursor { get; private set; }

        public long Revision { get; private set; }

        public bool HasChanges => _open.Count > 0 || _deleted.Count > 0;

        public static async Task<VersionBuckets> LoadAsync(ISummaryStore store, string model, string version, CancellationToken cancellationToken)
        {
            var buckets = new VersionBuckets();
            if (await store.GetSummaryStateAsync(model, version, cancellationToken).ConfigureAwait(false) is { } state)
            {
                buckets.Cursor = state.Cursor;
                buckets.Revision = state.Revision;
                foreach (var stored in await store.GetSummariesAsync(model, version, -1, cancellationToken).ConfigureAwait(false))
                {
                    if (stored.Segment.Length == 0)
                    {
                        buckets._stored[stored.Start] = (stored.Length, stored.Summary);
                    }
                }
            }

            return buckets;
        }

        /// <summary>
        /// The bucket a prediction of <paramref name="scoredAt"/> belongs to: its day's bucket when the day ended before
        /// <paramref name="daysBefore"/> or already has a day bucket, else its hour's.
        /// </summary>
        public (DateTimeOffset Start, TimeSpan Length) BucketOf(DateTimeOffset scoredAt, DateTimeOffset daysBefore)
        {
            var day = DayOf(scoredAt);
            if (day + Day <= daysBefore || LengthAt(day) == Day)
            {
                return (day, Day);
            }

            return (new DateTimeOffset(scoredAt.UtcTicks - scoredAt.UtcTicks % Hour.Ticks, TimeSpan.Zero), Hour);
        }

        private static DateTimeOffset DayOf(DateTimeOffset time) => new(time.UtcDateTime.Date, TimeSpan.Zero);

        private TimeSpan? LengthAt(DateTimeOffset start) =>
            _open.TryGetValue(start, out var open) ? open.Length : _stored.TryGetValue(start, out var stored) ? stored.Length : null;

        /// <summary>The bucket [start, start + length), opened for adding (from its stored document, if any).</summary>
        public LabelledSummary Open(DateTimeOffset start, TimeSpan length)
        {
            if (length == Day)
            {
                return OpenDay(start);
            }

            if (_open.TryGetValue(start, out var open))
            {
                return open.Summary;
            }

            var summary = new LabelledSummary();
            if (_stored.TryGetValue(start, out var stored))
            {
                summary.AddStored(stored.Summary);
            }

            _open[start] = (Hour, summary);
            _deleted.Remove(start);
            return summary;
        }

        /// <summary>
        /// The day bucket at <paramref name="day"/>, opened for adding: from the stored day bucket, or from the day's
        /// 00:00 hour bucket, which shares its start and so becomes the day bucket (open or stored).
        /// </summary>
        private LabelledSummary OpenDay(DateTimeOffset day)
        {
            if (_open.TryGetValue(day, out var open))
            {
                if (open.Length == Day)
                {
                    return open.Summary;
                }

                _open[day] = (Day, open.Summary); // the open 00:00 hour, which holds the stored one's rows already
                return open.Summary;
            }

            var summary = new LabelledSummary();
            if (_stored.TryGetValue(day, out var stored))
            {
                summary.AddStored(stored.Summary);
            }

            _open[day] = (Day, summary);
            _deleted.Remove(day);
            return summary;
        }

        /// <summary>The bucket [start, start + length), emptied, to be rebuilt.</summary>
        public LabelledSummary Replace(DateTimeOffset start, TimeSpan length)
        {
            var summary = new LabelledSummary();
            _open[start] = (length, summary);
            _deleted.Remove(start);
            return summary;
        }

        /// <summary>Merges the hour buckets of every day that ended before <paramref name="before"/> into one day bucket.</summary>
        public void MergeDays(DateTimeOffset before)
        {
            var hours = _stored.Where(b => b.Value.Length == Hour).Select(b => b.Key)
                .Concat(_open.Where(b => b.Value.Length == Hour).Select(b => b.Key))
                .Where(start => DayOf(start) + Day <= before)
                .Distinct().Order().ToList();
            foreach (var start in hours)
            {
                var day = DayOf(start);
                var summary = OpenDay(day); // takes the 00:00 hour in
                if (start == day)
                {
                    continue;
                }

                if (_open.Remove(start, out var hour))
                {
                    summary.Add(hour.Summary); // holds the stored document's rows already
                }
                else if (_stored.TryGetValue(start, out var stored))
                {
                    summary.AddStored(stored.Summary);
                }

                if (_stored.Remove(start))
                {
                    _deleted.Add(start);
                }
            }
        }

        /// <summary>Deletes every bucket that ends before <paramref name="before"/>.</summary>
        public void DropBefore(DateTimeOffset before)
        {
            foreach (var start in _stored.Where(b => b.Key + b.Value.Length <= before).Select(b => b.Key).ToList())
            {
                _stored.Remove(start);
                _deleted.Add(start);
            }

            foreach (var start in _open.Where(b => b.Key + b.Value.Length <= before).Select(b => b.Key).ToList())
            {
                _open.Remove(start);
                _deleted.Add(start);
            }
        }

        public (List<StoredSummary> Upserts, List<(string, DateTimeOffset)> Deletes) Changes()
        {
            var upserts = _open.Select(b => new StoredSummary("", b.Key, b.Value.Length, b.Value.Summary.Write(), 0)).ToList();
            var deletes = _deleted.Where(d => !_open.ContainsKey(d)).Select(d => ("", d)).ToList();
            return (upserts, deletes);
        }

        public void Saved(long cursor, long revision, List<StoredSummary> upserts)
        {
            foreach (var upsert in upserts)
            {
                _stored[upsert.Start] = (upsert.Length, upsert.Summary);
            }

            _open.Clear();
            _deleted.Clear();
            Cursor = cursor;
            Revision = revision;
        }
    }
}
