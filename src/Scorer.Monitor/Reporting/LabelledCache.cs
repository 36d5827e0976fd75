using System.Buffers;
using System.Collections.Concurrent;
using Scorer.Store;

namespace Scorer.Monitor.Reporting;

/// <summary>
/// Every labelled prediction of each version the monitor reports on, in memory, as columns (prediction time, p,
/// outcome) in ascending order of p, kept up to date from the store's change feed
/// (<see cref="ILabelledStore.GetLabelledChangesAsync"/>). A report over a window then reads no rows from the store and
/// sorts nothing: it takes the window's rows in p order in one sequential scan (<see cref="WindowAsync"/>), and the
/// statistics are computed exactly over them (<see cref="Statistics.CalibrationStatistics.ComputeSorted"/>).
/// </summary>
/// <remarks>
/// Memory: two sets of columns of 8 (time) + 8 (p) + 1 (outcome) + 4 (slot) bytes, a position of 4 bytes and the id
/// map (about 40 bytes) per labelled prediction: about 86 MB per million. Each refresh costs what changed since the
/// last one, plus one sequential merge (linear in the version's rows) when something new arrived. Every replica keeps its own cache from the same
/// store, so every replica reports the same numbers.
/// </remarks>
public sealed class LabelledCache(ILabelledStore store, MonitorOptions options, SummaryReader? summaries = null)
{
    /// <summary>Changes read from the feed per page while catching up.</summary>
    private const int PageRows = 50_000;

    private readonly ConcurrentDictionary<(string Model, string Version), VersionRows> _versions = new();

    /// <summary>
    /// Brings the version's rows up to date with the store, then returns the labelled predictions scored in
    /// [from, to) in ascending order of p. Dispose the window to return its buffers.
    /// </summary>
    public async Task<LabelledWindow> WindowAsync(string model, string version, DateTimeOffset from, DateTimeOffset to,
        CancellationToken cancellationToken = default)
    {
        var rows = _versions.GetOrAdd((model, version), _ => new VersionRows());
        await rows.Gate.WaitAsync(cancellationToken).ConfigureAwait(false);
        try
        {
            await CatchUpAsync(rows, model, version, cancellationToken).ConfigureAwait(false);
            return rows.Select(from.UtcTicks, to.UtcTicks);
        }
        finally
        {
            rows.Gate.Release();
        }
    }

    /// <summary>
    /// Brings the version's rows up to date, then cuts those scored in [from, to) into consecutive buckets of prediction
    /// time laid out by <paramref name="layout"/> (given the earliest such row's time, or null when there is none: the
    /// first bucket's start, the bucket length and how many buckets); rows outside the buckets are left out. Each
    /// bucket's rows come in ascending order of p, ready for <see cref="Statistics.CalibrationStatistics.ComputeSorted"/>.
    /// One scan for the earliest time, one for the buckets.
    /// </summary>
    public async Task<IReadOnlyList<(double[] Probability, byte[] Outcome)>> BucketsAsync(string model, string version, DateTimeOffset from, DateTimeOffset to,
        Func<DateTimeOffset?, (DateTimeOffset Start, TimeSpan Step, int Count)> layout, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(layout);
        var rows = _versions.GetOrAdd((model, version), _ => new VersionRows());
        await rows.Gate.WaitAsync(cancellationToken).ConfigureAwait(false);
        try
        {
            await CatchUpAsync(rows, model, version, cancellationToken).ConfigureAwait(false);
            return rows.SelectBuckets(from.UtcTicks, to.UtcTicks, layout);
        }
        finally
        {
            rows.Gate.Release();
        }
    }

    /// <summary>
    /// Reads the feed page by page to its end, evicting the oldest rows beyond the bound after each page. A version seen
    /// for the first time, whose summaries are stored, is first loaded from the newest buckets that fit the bound (their
    /// rows as the feed gave them up to the summaries' cursor), and the feed is read on from that cursor: a start reads
    /// at most about ExactRows rows, not the version's history.
    /// </summary>
    private async Task CatchUpAsync(VersionRows rows, string model, string version, CancellationToken cancellationToken)
    {
        if (rows.Cursor == 0 && !rows.Seeded && summaries is not null)
        {
            rows.Seeded = true;
            var (state, buckets) = await summaries.CountsAsync(model, version, cancellationToken).ConfigureAwait(false);
            if (state is { Cursor: > 0 })
            {
                long held = 0;
                DateTimeOffset? from = null;
                foreach (var (start, count) in buckets)
                {
                    if (held + count > options.ExactRows)
                    {
                        break;
                    }

                    held += count;
                    from = start;
                }

                var until = new DateTimeOffset(3000, 1, 1, 0, 0, 0, TimeSpan.Zero);
                var since = from ?? until;
                if (from is { } f)
                {
                    var points = await store.GetLabelledUpToAsync(model, version, f, until, state.Cursor, cancellationToken).ConfigureAwait(false);
                    rows.Apply(new LabelledChanges(points, state.Cursor));
                }
                else
                {
                    rows.Apply(new LabelledChanges([], state.Cursor));
                }

                // Rows older than the buckets loaded were not read: older buckets' rows, and with a summary retention rows
                // older than every bucket kept.
                if ((buckets.Count > 0 && buckets[^1].Start < since) || options.SummaryRetention is not null)
                {
                    rows.EvictedBefore = since.UtcTicks;
                }
            }
        }

        LabelledChanges changes;
        do
        {
            changes = await store.GetLabelledChangesAsync(model, version, rows.Cursor, PageRows, cancellationToken).ConfigureAwait(false);
            rows.Apply(changes);
            rows.Evict(options.ExactRows);
        }
        while (changes.Points.Count >= PageRows);
    }

    /// <summary>The rows held, over every version, for the memory metrics.</summary>
    public long Rows => _versions.Values.Sum(v => (long)v.Count);

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

    /// <summary>
    /// The columns of one version, kept in ascending order of p (time, p, outcome, and the row's slot), so that a window
    /// is one sequential scan. A row's slot is its arrival number; <c>_position[slot]</c> says where the row is now,
    /// for relabelling. New rows are sorted among themselves and merged in, into a second set of columns that then
    /// becomes the first (one linear, sequential pass). Touched only under <see cref="Gate"/>.
    /// </summary>
    private sealed class VersionRows
    {
        public readonly SemaphoreSlim Gate = new(1, 1);
        public long Cursor;
        public long Applied;
        private Dictionary<Guid, int> _slots = [];
        private Columns _rows = new(0);
        private Columns _spare = new(0);
        private int[] _position = [];
        private int _count;

        /// <summary>Rows scored before this (ticks) were evicted: a window is complete here only if it starts at or after it.</summary>
        public long EvictedBefore = long.MinValue;

        /// <summary>Whether the first load from the summaries was tried.</summary>
        public bool Seeded;

        public int Count => Volatile.Read(ref _count);

        /// <summary>
        /// When more than <paramref name="keep"/> + a quarter rows are held, drops the oldest by prediction time down to
        /// <paramref name="keep"/> (more while rows tied in time with the oldest kept stay within the bound; fewer when
        /// they would not), in one pass that keeps the p order, and renumbers the slots.
        /// </summary>
        public void Evict(int keep)
        {
            if (_count <= keep + keep / 4)
            {
                return;
            }

            var ticks = new long[_count];
            Array.Copy(_rows.Ticks, ticks, _count);
            Array.Sort(ticks);
            // Rows scored at or before `cut` go. Kept: the newest `keep` rows and those tied with the oldest of them,
            // unless the ties would pass the bound (rows of one message share their scoring time): then only rows newer.
            long cut;
            if (keep == 0)
            {
                cut = ticks[_count - 1];
            }
            else
            {
                var oldestKept = ticks[_count - keep];
                var tiedFrom = _count - keep;
                while (tiedFrom > 0 && ticks[tiedFrom - 1] == oldestKept)
                {
                    tiedFrom--;
                }

                cut = _count - tiedFrom <= keep + keep / 4 ? oldestKept - 1 : oldestKept;
            }

            var remap = new int[_count];
            Array.Fill(remap, -1);
            var rows = _rows;
            var k = 0;
            for (var i = 0; i < _count; i++)
            {
                if (rows.Ticks[i] <= cut)
                {
                    continue;
                }

                remap[rows.Slot[i]] = k;
                rows.P[k] = rows.P[i];
                rows.Ticks[k] = rows.Ticks[i];
                rows.Y[k] = rows.Y[i];
                rows.Slot[k] = k;
                _position[k] = k;
                k++;
            }

            var slots = new Dictionary<Guid, int>(k);
            foreach (var (id, slot) in _slots)
            {
                if (remap[slot] >= 0)
                {
                    slots.Add(id, remap[slot]);
                }
            }

            _slots = slots;
            _count = k;
            EvictedBefore = Math.Max(EvictedBefore, cut + 1);
            var capacity = keep + keep / 4 + PageRows;
            if (_rows.Capacity > 2 * capacity)
            {
                var smaller = new Columns(capacity);
                Array.Copy(rows.P, smaller.P, k);
                Array.Copy(rows.Ticks, smaller.Ticks, k);
                Array.Copy(rows.Y, smaller.Y, k);
                Array.Copy(rows.Slot, smaller.Slot, k);
                _rows = smaller;
                _spare = new Columns(0);
                Array.Resize(ref _position, capacity);
            }
        }

        public void Apply(LabelledChanges changes)
        {
            var points = changes.Points;
            var added = new List<(double P, long Ticks, byte Y, int Slot)>();
            var addedIndex = new Dictionary<int, int>();
            foreach (var point in points)
            {
                if (_slots.TryGetValue(point.Id, out var slot))
                {
                    // Relabelled: the prediction (time, p) never changes, only its outcome.
                    if (slot < _count)
                    {
                        _rows.Y[_position[slot]] = point.Outcome;
                    }
                    else
                    {
                        var k = addedIndex[slot];
                        added[k] = added[k] with { Y = point.Outcome };
                    }

                    continue;
                }

                slot = _count + added.Count;
                _slots.Add(point.Id, slot);
                addedIndex.Add(slot, added.Count);
                added.Add((point.Probability, point.ScoredAt.UtcTicks, point.Outcome, slot));
            }

            if (added.Count > 0)
            {
                Merge(added);
            }

            Cursor = changes.Cursor;
            Volatile.Write(ref Applied, Applied + points.Count);
        }

        private void Merge(List<(double P, long Ticks, byte Y, int Slot)> added)
        {
            added.Sort((a, b) => a.P.CompareTo(b.P));
            var total = _count + added.Count;
            if (_spare.Capacity < total)
            {
                _spare = new Columns(Math.Max(total, _rows.Capacity * 2));
            }

            if (_position.Length < total)
            {
                Array.Resize(ref _position, Math.Max(total, _position.Length * 2));
            }

            var from = _rows;
            var to = _spare;
            int a = 0, b = 0, k = 0;
            while (a < _count || b < added.Count)
            {
                if (b == added.Count || (a < _count && from.P[a] <= added[b].P))
                {
                    to.P[k] = from.P[a];
                    to.Ticks[k] = from.Ticks[a];
                    to.Y[k] = from.Y[a];
                    to.Slot[k] = from.Slot[a];
                    a++;
                }
                else
                {
                    var row = added[b++];
                    to.P[k] = row.P;
                    to.Ticks[k] = row.Ticks;
                    to.Y[k] = row.Y;
                    to.Slot[k] = row.Slot;
                }

                _position[to.Slot[k]] = k;
                k++;
            }

            _spare = from;
            _rows = to;
            _count = total;
        }

        /// <summary>SplitMix64's finaliser: a sum of these over the window's slots tells one set of rows from another.</summary>
        private static ulong Mix(ulong z)
        {
            z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9UL;
            z = (z ^ (z >> 27)) * 0x94D049BB133111EBUL;
            return z ^ (z >> 31);
        }

        public LabelledWindow Select(long fromTicks, long toTicks)
        {
            var p = ArrayPool<double>.Shared.Rent(Math.Max(1, _count));
            var y = ArrayPool<byte>.Shared.Rent(Math.Max(1, _count));
            var rows = _rows;
            var n = 0;
            var members = 0UL;
            for (var i = 0; i < _count; i++)
            {
                var t = rows.Ticks[i];
                if (t >= fromTicks && t < toTicks)
                {
                    p[n] = rows.P[i];
                    y[n] = rows.Y[i];
                    n++;
                    members += Mix((ulong)rows.Slot[i]);
                }
            }

            return new LabelledWindow(p, y, n, (Applied, n, members), fromTicks >= EvictedBefore);
        }

        public (double[] Probability, byte[] Outcome)[] SelectBuckets(long fromTicks, long toTicks,
            Func<DateTimeOffset?, (DateTimeOffset Start, TimeSpan Step, int Count)> layout)
        {
            var rows = _rows;
            long? earliest = null;
            for (var i = 0; i < _count; i++)
            {
                var t = rows.Ticks[i];
                if (t >= fromTicks && t < toTicks && (earliest is null || t < earliest))
                {
                    earliest = t;
                }
            }

            var (start, step, count) = layout(earliest is { } e ? new DateTimeOffset(e, TimeSpan.Zero) : null);
            ArgumentOutOfRangeException.ThrowIfLessThanOrEqual(step, TimeSpan.Zero);
            var p = new List<double>[count];
            var y = new List<byte>[count];
            for (var k = 0; k < count; k++)
            {
                (p[k], y[k]) = ([], []);
            }

            var startTicks = start.UtcTicks;
            for (var i = 0; i < _count; i++)
            {
                var t = rows.Ticks[i];
                if (t < fromTicks || t >= toTicks || t < startTicks)
                {
                    continue;
                }

                var k = (t - startTicks) / step.Ticks;
                if (k < count)
                {
                    p[k].Add(rows.P[i]);
                    y[k].Add(rows.Y[i]);
                }
            }

            return [.. Enumerable.Range(0, count).Select(k => (p[k].ToArray(), y[k].ToArray()))];
        }

        private sealed class Columns(int capacity)
        {
            public int Capacity { get; } = capacity;

            public double[] P { get; } = new double[capacity];

            public long[] Ticks { get; } = new long[capacity];

            public byte[] Y { get; } = new byte[capacity];

            public int[] Slot { get; } = new int[capacity];
        }
    }
}

/// <summary>The labelled predictions of a window in ascending order of p, in pooled buffers returned on disposal.</summary>
public sealed class LabelledWindow : IDisposable
{
    private double[]? _p;
    private byte[]? _y;

    internal LabelledWindow(double[] p, byte[] y, int count, (long Applied, int Count, ulong Members) fingerprint, bool complete)
    {
        Complete = complete;
        _p = p;
        _y = y;
        Count = count;
        Fingerprint = fingerprint;
    }

    public int Count { get; }

    /// <summary>Whether the cache holds every labelled prediction of the window (none was evicted from it).</summary>
    public bool Complete { get; }

    /// <summary>
    /// Which rows, with which outcomes, the window holds: the same fingerprint means the same rows and outcomes (the
    /// changes applied so far, the row count and a hash of the rows' slots), so a report computed over them still holds.
    /// </summary>
    public (long Applied, int Count, ulong Members) Fingerprint { get; }

    public ReadOnlySpan<double> Probability => (_p ?? throw new ObjectDisposedException(nameof(LabelledWindow))).AsSpan(0, Count);

    public ReadOnlySpan<byte> Outcome => (_y ?? throw new ObjectDisposedException(nameof(LabelledWindow))).AsSpan(0, Count);

    public void Dispose()
    {
        if (_p is not null)
        {
            ArrayPool<double>.Shared.Return(_p);
            ArrayPool<byte>.Shared.Return(_y!);
            _p = null;
            _y = null;
        }
    }
}
