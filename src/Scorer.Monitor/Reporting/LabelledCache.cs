using System.Buffers;
using System.Collections.Concurrent;
using Scorer.Store;

namespace Scorer.Monitor.Reporting;

/// <summary>
/// Every labelled prediction of each version the monitor reports on, in memory, as columns (prediction time, p,
/// outcome) with an index in ascending order of p, kept up to date from the store's change feed
/// (<see cref="IScorerStore.GetLabelledChangesAsync"/>). A report over a window then reads no rows from the store and
/// sorts nothing: it takes the window's rows in p order straight from the index (<see cref="WindowAsync"/>), and the
/// statistics are computed exactly over them (<see cref="Statistics.CalibrationStatistics.ComputeSorted"/>).
/// </summary>
/// <remarks>
/// Memory: 8 (time) + 8 (p) + 1 (outcome) + 4 (index) bytes per labelled prediction, plus the id map (about 40 bytes
/// per prediction): about 60 MB per million. Each refresh costs what changed since the last one, plus one merge of the
/// p index (linear in the version's rows) when something new arrived. Every replica keeps its own cache from the same
/// store, so every replica reports the same numbers.
/// </remarks>
public sealed class LabelledCache(IScorerStore store)
{
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
            var changes = await store.GetLabelledChangesAsync(model, version, rows.Cursor, cancellationToken).ConfigureAwait(false);
            rows.Apply(changes);
            return rows.Select(from.UtcTicks, to.UtcTicks);
        }
        finally
        {
            rows.Gate.Release();
        }
    }

    /// <summary>How many changes have been applied to a version's rows (grows whenever an outcome arrives or changes).</summary>
    public long Generation(string model, string version) => _versions.TryGetValue((model, version), out var rows) ? Volatile.Read(ref rows.Applied) : 0;

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

    /// <summary>The columns of one version. Touched only under <see cref="Gate"/>.</summary>
    private sealed class VersionRows
    {
        public readonly SemaphoreSlim Gate = new(1, 1);
        public long Cursor;
        public long Applied;
        private readonly Dictionary<Guid, int> _slots = [];
        private long[] _ticks = new long[1024];
        private double[] _p = new double[1024];
        private byte[] _y = new byte[1024];
        private int[] _order = [];
        private int _count;

        public void Apply(LabelledChanges changes)
        {
            var points = changes.Points;
            var added = new List<int>();
            foreach (var point in points)
            {
                if (_slots.TryGetValue(point.Id, out var slot))
                {
                    _y[slot] = point.Outcome; // relabelled: the prediction (time, p) never changes
                    continue;
                }

                if (_count == _p.Length)
                {
                    var size = _p.Length * 2;
                    Array.Resize(ref _ticks, size);
                    Array.Resize(ref _p, size);
                    Array.Resize(ref _y, size);
                }

                slot = _count++;
                _slots.Add(point.Id, slot);
                _ticks[slot] = point.ScoredAt.UtcTicks;
                _p[slot] = point.Probability;
                _y[slot] = point.Outcome;
                added.Add(slot);
            }

            if (added.Count > 0)
            {
                MergeIntoOrder(added);
            }

            Cursor = changes.Cursor;
            Volatile.Write(ref Applied, Applied + points.Count);
        }

            /// <summary>SplitMix64's finaliser: a sum of these over the window's slots tells one set of rows from another.</summary>
        private static ulong Mix(ulong z)
        {
            z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9UL;
            z = (z ^ (z >> 27)) * 0x94D049BB133111EBUL;
            return z ^ (z >> 31);
        }

        /// <summary>Sorts the new slots by p and merges them into the p index (one linear pass).</summary>
        private void MergeIntoOrder(List<int> added)
        {
            var newSlots = added.ToArray();
            var keys = new double[newSlots.Length];
            for (var i = 0; i < newSlots.Length; i++)
            {
                keys[i] = _p[newSlots[i]];
            }

            Array.Sort(keys, newSlots);
            var merged = new int[_order.Length + newSlots.Length];
            int a = 0, b = 0, k = 0;
            while (a < _order.Length && b < newSlots.Length)
            {
                merged[k++] = _p[_order[a]] <= keys[b] ? _order[a++] : newSlots[b++];
            }

            while (a < _order.Length)
            {
                merged[k++] = _order[a++];
            }

            while (b < newSlots.Length)
            {
                merged[k++] = newSlots[b++];
            }

            _order = merged;
        }

        public LabelledWindow Select(long fromTicks, long toTicks)
        {
            var p = ArrayPool<double>.Shared.Rent(Math.Max(1, _order.Length));
            var y = ArrayPool<byte>.Shared.Rent(Math.Max(1, _order.Length));
            var n = 0;
            var members = 0UL;
            foreach (var slot in _order)
            {
                var t = _ticks[slot];
                if (t >= fromTicks && t < toTicks)
                {
                    p[n] = _p[slot];
                    y[n] = _y[slot];
                    n++;
                    members += Mix((ulong)slot);
                }
            }

            return new LabelledWindow(p, y, n, (Applied, n, members));
        }
    }
}

/// <summary>The labelled predictions of a window in ascending order of p, in pooled buffers returned on disposal.</summary>
public sealed class LabelledWindow : IDisposable
{
    private double[]? _p;
    private byte[]? _y;

    internal LabelledWindow(double[] p, byte[] y, int count, (long Applied, int Count, ulong Members) fingerprint)
    {
        _p = p;
        _y = y;
        Count = count;
        Fingerprint = fingerprint;
    }

    public int Count { get; }

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
