using System.Buffers.Binary;
using System.Collections.Concurrent;
using Scorer.Statistics;
using Scorer.Statistics.Summaries;
using Scorer.Store;

namespace Scorer.Monitor.Reporting;

/// <summary>
/// Every replica's copy of the stored summaries (<see cref="SummaryWriter"/> writes them): per version, the documents
/// of its buckets as bytes, refreshed by reading only the buckets written since the last read, and the report of a
/// window merged from the buckets that start inside it.
/// </summary>
/// <remarks>
/// Memory: per version, each bucket's document (68 bytes per occupied η bin plus 541 bytes), and the last report per
/// window. A report merges into one dense summary (about 400 KB, freed after it) and computes the statistics from it.
/// </remarks>
public sealed class SummaryReader(ISummaryStore store)
{
    private readonly ConcurrentDictionary<(string Model, string Version), VersionSummaries> _versions = new();

    /// <summary>What a summarised window holds: its first bucket's start, the rows, and the store's state it was read at.</summary>
    public sealed record SummarisedWindow(DateTimeOffset From, long Rows, CalibrationReport Report, int Buckets);

    /// <summary>
    /// The report of the buckets of a version that start in [from, to), merged, with intervals at
    /// <paramref name="level"/>; reused while the version's summaries are unchanged.
    /// </summary>
    public async Task<SummarisedWindow> WindowAsync(string model, string version, DateTimeOffset from, DateTimeOffset to, double level,
        CancellationToken cancellationToken = default)
    {
        var summaries = _versions.GetOrAdd((model, version), _ => new VersionSummaries());
        await summaries.Gate.WaitAsync(cancellationToken).ConfigureAwait(false);
        try
        {
            await summaries.RefreshAsync(store, model, version, cancellationToken).ConfigureAwait(false);
            var chosen = summaries.Buckets.Where(b => b.Key >= from && b.Key < to).ToList();
            var key = (chosen.Count == 0 ? from : chosen[0].Key, chosen.Count, summaries.Revision, level);
            if (summaries.Reports.TryGetValue((from, to), out var last) && last.Key == key)
            {
                return last.Window;
            }

            var merged = new LabelledSummary();
            foreach (var bucket in chosen)
            {
                merged.AddStored(bucket.Value.Summary);
            }

            var window = new SummarisedWindow(key.Item1, merged.Count, SummaryStatistics.Compute(merged, level), chosen.Count);
            if (summaries.Reports.Count > 16)
            {
                summaries.Reports.Clear();
            }

            summaries.Reports[(from, to)] = (key, window);
            return window;
        }
        finally
        {
            summaries.Gate.Release();
        }
    }

    /// <summary>
    /// The summarised rows per bucket of a version, newest first (bucket start, rows), from the last refresh, for the row
    /// cache to choose how far back to load.
    /// </summary>
    public async Task<(SummaryState? State, IReadOnlyList<(DateTimeOffset Start, long Rows)> Buckets)> CountsAsync(string model, string version,
        CancellationToken cancellationToken = default)
    {
        var summaries = _versions.GetOrAdd((model, version), _ => new VersionSummaries());
        await summaries.Gate.WaitAsync(cancellationToken).ConfigureAwait(false);
        try
        {
            var state = await summaries.RefreshAsync(store, model, version, cancellationToken).ConfigureAwait(false);
            return (state, [.. summaries.Buckets.Reverse().Select(b => (b.Key, BinaryPrimitives.ReadInt64LittleEndian(b.Value.Summary.AsSpan(1))))]);
        }
        finally
        {
            summaries.Gate.Release();
        }
    }

    /// <summary>The number of versions and of bucket documents held, and their bytes, for the memory metrics.</summary>
    public (int Versions, int Buckets, long Bytes) Size()
    {
        int buckets = 0;
        long bytes = 0;
        foreach (var v in _versions.Values)
        {
            var held = v.Buckets;
            buckets += held.Count;
            bytes += held.Values.Sum(b => (long)b.Summary.Length);
        }

        return (_versions.Count, buckets, bytes);
    }

    /// <summary>Forgets versions no longer reported on (retired or unloaded).</summary>
    public void Retain(Func<string, string, bool> keep)
    {
        foreach (var key in _versions.Keys)
        {
            if (!keep(key.Model, key.Version))
            {
                _versions.TryRemove(key, out _);
            }
        }
    }

    private sealed class VersionSummaries
    {
        public readonly SemaphoreSlim Gate = new(1, 1);
        public SortedDictionary<DateTimeOffset, (long Revision, byte[] Summary)> Buckets = [];
        public readonly Dictionary<(DateTimeOffset, DateTimeOffset), ((DateTimeOffset, int, long, double) Key, SummarisedWindow Window)> Reports = [];
        public long Revision = -1;

        public async Task<SummaryState?> RefreshAsync(ISummaryStore store, string model, string version, CancellationToken cancellationToken)
        {
            var state = await store.GetSummaryStateAsync(model, version, cancellationToken).ConfigureAwait(false);
            if (state is null || state.Revision == Revision)
            {
                return state;
            }

            var stored = await store.GetSummariesAsync(model, version, Revision, cancellationToken).ConfigureAwait(false);
            var next = new SortedDictionary<DateTimeOffset, (long, byte[])>();
            foreach (var bucket in stored.Where(s => s.Segment.Length == 0))
            {
                if (bucket.Revision > Revision)
                {
                    next[bucket.Start] = (bucket.Revision, bucket.Summary);
                }
                else if (Buckets.TryGetValue(bucket.Start, out var held) && held.Revision == bucket.Revision)
                {
                    next[bucket.Start] = held;
                }
                else
                {
                    // Not held at this revision (written between the two reads): read everything again next time.
                    Revision = -1;
                    return state;
                }
            }

            Buckets = next;
            Revision = state.Revision;
            return state;
        }
    }
}
