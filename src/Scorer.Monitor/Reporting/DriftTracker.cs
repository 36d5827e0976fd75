using System.Collections.Concurrent;
using System.Runtime.CompilerServices;
using Microsoft.Extensions.Logging;
using Microsoft.Extensions.Logging.Abstractions;
using Scorer.Engine;
using Scorer.Engine.Scoring;
using Scorer.ModelFile;
using Scorer.Statistics;
using Scorer.Registry;
using Scorer.Store;

namespace Scorer.Monitor.Reporting;

/// <summary>The population stability of a window's scored rows against the model file's baseline, without labels.</summary>
public sealed record DriftView(double? Score, IReadOnlyDictionary<string, double> Features, long Rows);

/// <summary>
/// Counts every scored row, as it is scored, into per-hour bins of the version's baseline (the linear predictor's bins,
/// each numeric feature's bins, each categorical feature's levels plus "unseen" and "missing"), and adds the counts
/// to the store every second (<see cref="FlushAsync"/>); turns a window's stored counts into the population
/// stability index (PSI, docs/monitoring.md). Counting is a few comparisons per feature on values the scoring path has
/// already bound, summed per request before one short lock, so it costs the request path little and the log writer
/// nothing.
/// </summary>
/// <remarks>
/// Bounded: at most <c>maxTallies</c> tallies (one per version and hour) are held at once. A tally is let go once the
/// store has its counts and its hour is more than an hour past; while the store fails they stay, and a request that
/// would need one more is not counted into the drift bins: its rows are counted in <see cref="DroppedRows"/> and logged
/// (the rows themselves are scored and logged as usual). Counts already held are never let go before the store has them.
/// </remarks>
public sealed partial class DriftTracker(IDriftCountStore store, TimeProvider time, int maxTallies, ILogger<DriftTracker> logger)
{
    /// <summary>The default bound on tallies held (<c>Scorer:Limits:MaxDriftTallies</c>).</summary>
    public const int DefaultMaxTallies = 10_000;

    /// <summary>A refused tally is logged the first time and then every this many.</summary>
    internal const int LogEvery = 1_000;

    /// <summary>A tracker with the default bound and no log.</summary>
    public DriftTracker(IDriftCountStore store, TimeProvider time)
        : this(store, time, DefaultMaxTallies, NullLogger<DriftTracker>.Instance)
    {
    }

    /// <summary>The series of the linear predictor (a name the model file keeps from features).</summary>
    public const string ScoreSeries = ModelFile.ModelDocument.LinearPredictorSeries;

    /// <summary>Bin of a categorical value the baseline does not list.</summary>
    public const int UnseenBin = -1;

    /// <summary>Bin of a missing value.</summary>
    public const int MissingBin = -2;

    private const string FeaturePrefix = "feature:";

    private readonly ConditionalWeakTable<CompiledModel, Plan?> _plans = [];
    private readonly ConcurrentDictionary<(string Model, string Version, long Hour), HourCounts> _pending = new();
    private int _tallies; // the entries of _pending, kept here because ConcurrentDictionary.Count takes every lock
    private long _droppedTallies;
    private long _droppedRows;

    /// <summary>Tallies held now (versions × hours whose counts the store does not have yet, or whose hour is recent).</summary>
    public int Tallies => Volatile.Read(ref _tallies);

    /// <summary>Requests' tallies refused at the bound since start.</summary>
    public long DroppedTallies => Interlocked.Read(ref _droppedTallies);

    /// <summary>Rows of those requests since start: scored and logged, but not in the drift bins.</summary>
    public long DroppedRows => Interlocked.Read(ref _droppedRows);

    /// <summary>A tally of one request's rows for one version and hour; <see cref="Commit"/> adds it to the tracker.</summary>
    public sealed class Tally
    {
        private readonly DriftTracker _owner;
        private readonly Plan _plan;
        private readonly (string Model, string Version, long Hour) _key;
        private readonly long[] _counts;
        private long _rows;

        internal Tally(DriftTracker owner, Plan plan, (string, string, long) key)
        {
            _owner = owner;
            _plan = plan;
            _key = key;
            _counts = new long[plan.Slots];
        }

        /// <summary>A scored row given by name (as the named scoring path bound it).</summary>
        public void Add(double eta, ReadOnlySpan<NamedValue> row)
        {
            _rows++;
            _plan.CountScore(_counts, eta);
            Span<bool> seen = _plan.Features.Length <= 256 ? stackalloc bool[_plan.Features.Length] : new bool[_plan.Features.Length];
            foreach (ref readonly var nv in row)
            {
                var f = _plan.Model.FeatureIndexOf(nv.Name);
                if (f < 0 || _plan.Features[f] is not { } feature || seen[f])
                {
                    continue;
                }

                seen[f] = true;
                feature.CountNamed(_counts, nv.Value);
            }

            for (var f = 0; f < seen.Length; f++)
            {
                if (!seen[f] && _plan.Features[f] is { } feature)
                {
                    _counts[feature.Offset + feature.Missing]++;
                }
            }
        }

        /// <summary>A scored row in model feature order (categoricals as level codes, NaN missing), as the dense path binds it.</summary>
        public void Add(double eta, ReadOnlySpan<double> features)
        {
            _rows++;
            _plan.CountScore(_counts, eta);
            for (var f = 0; f < _plan.Features.Length && f < features.Length; f++)
            {
                _plan.Features[f]?.CountDense(_counts, features[f]);
            }
        }

        /// <summary>Adds the counts to the tracker, or counts the rows as dropped when the tracker is at its bound.</summary>
        public void Commit()
        {
            if (_rows > 0)
            {
                _owner.Commit(_key, _plan, _counts, _rows);
            }
        }
    }

    private void Commit((string Model, string Version, long Hour) key, Plan plan, long[] counts, long rows)
    {
        while (true)
        {
            if (!_pending.TryGetValue(key, out var hour))
            {
                if (Interlocked.Increment(ref _tallies) > maxTallies)
                {
                    Interlocked.Decrement(ref _tallies);
                    if (!_pending.TryGetValue(key, out hour)) // another request may have made it meanwhile
                    {
                        var dropped = Interlocked.Increment(ref _droppedTallies);
                        var droppedRows = Interlocked.Add(ref _droppedRows, rows);
                        if (dropped % LogEvery == 1)
                        {
                            Dropping(maxTallies, key.Model, key.Version, dropped, droppedRows);
                        }

                        return;
                    }
                }
                else
                {
                    var made = new HourCounts(plan);
                    hour = _pending.GetOrAdd(key, made);
                    if (!ReferenceEquals(hour, made))
                    {
                        Interlocked.Decrement(ref _tallies);
                    }
                }
            }

            if (hour.TryAdd(counts))
            {
                return;
            }

            // Let go by a flush between the lookup and the add: whichever takes it out of the dictionary counts it out.
            if (_pending.TryRemove(KeyValuePair.Create(key, hour)))
            {
                Interlocked.Decrement(ref _tallies);
            }
        }
    }

    [LoggerMessage(EventId = 5010, Level = LogLevel.Warning,
        Message = "Drift tallies at their bound ({Tallies}, Scorer:Limits:MaxDriftTallies): rows of {Model} {Version} are scored but not counted into the drift bins; {Dropped} requests ({DroppedRows} rows) so far")]
    private partial void Dropping(int tallies, string model, string version, long dropped, long droppedRows);

    /// <summary>A tally for a version's rows scored at one time, or null when the version has no baseline to compare with.</summary>
    public Tally? Begin(LoadedVersion version, DateTimeOffset scoredAt)
    {
        var plan = _plans.GetValue(version.Compiled, Plan.For);
        return plan is null ? null : new Tally(this, plan, (version.Model, version.Version, scoredAt.ToUnixTimeMilliseconds() / 3_600_000));
    }

    /// <summary>Adds what was counted since the last flush to the store (and keeps it for the next flush if the store fails).</summary>
    public async Task FlushAsync(CancellationToken cancellationToken = default)
    {
        var counts = new List<DriftCount>();
        var taken = new List<((string Model, string Version, long Hour) Key, long[] Counts)>();
        foreach (var (key, hour) in _pending)
        {
            var snapshot = hour.Take();
            if (snapshot is null)
            {
                continue;
            }

            taken.Add((key, snapshot));
            var at = DateTimeOffset.FromUnixTimeMilliseconds(key.Hour * 3_600_000);
            foreach (var (series, bin, slot) in hour.Plan.SlotMap())
            {
                if (snapshot[slot] > 0)
                {
                    counts.Add(new DriftCount(key.Model, key.Version, at, series, bin, snapshot[slot]));
                }
            }
        }

        if (counts.Count > 0)
        {
            try
            {
                await store.AddDriftCountsAsync(counts, cancellationToken).ConfigureAwait(false);
            }
            catch
            {
                foreach (var (key, snapshot) in taken)
                {
                    _pending[key].PutBack(snapshot); // counted again at the next flush; only a flush lets a tally go
                }

                throw;
            }
        }

        // Let go of every tally the store has all of whose hour is over by more than an hour (rows of the past hour may
        // still be in flight), whether or not it was written in this flush.
        var pastHour = (time.GetUtcNow().ToUnixTimeMilliseconds() / 3_600_000) - 1;
        foreach (var (key, hour) in _pending)
        {
            if (key.Hour < pastHour && hour.TryClose() && _pending.TryRemove(KeyValuePair.Create(key, hour)))
            {
                Interlocked.Decrement(ref _tallies);
            }
        }
    }

    /// <summary>The PSI of each series from a window's counts, against the version's baseline.</summary>
    public static DriftView Psi(LoadedVersion version, IReadOnlyList<DriftCount> counts)
    {
        var features = new SortedDictionary<string, double>(StringComparer.Ordinal);
        if (version.Document.Baseline is not { } baseline || counts.Count == 0)
        {
            return new DriftView(null, features, 0);
        }

        var bySeries = counts.GroupBy(c => c.Series).ToDictionary(g => g.Key, g => g.ToDictionary(c => c.Bin, c => c.Rows), StringComparer.Ordinal);
        double? score = null;
        long rows = 0;
        if (baseline.LinearPredictor is { } lp && bySeries.TryGetValue(ScoreSeries, out var scoreCounts))
        {
            rows = scoreCounts.Values.Sum();
            score = Index([.. lp.Proportions], scoreCounts, includeMissing: false);
        }

        foreach (var (name, bins) in baseline.Numeric)
        {
            if (bySeries.TryGetValue(FeaturePrefix + name, out var c))
            {
                features[name] = Index([.. bins.Proportions], c, includeMissing: true);
                rows = Math.Max(rows, c.Values.Sum());
            }
        }

        foreach (var (name, levels) in baseline.Levels)
        {
            if (bySeries.TryGetValue(FeaturePrefix + name, out var c))
            {
                var expected = levels.OrderBy(l => l.Key, StringComparer.Ordinal).Select(l => l.Value).ToList();
                expected.Add(0); // unseen
                var withUnseen = new Dictionary<int, long>(c);
                if (withUnseen.Remove(UnseenBin, out var unseen))
                {
                    withUnseen[expected.Count - 1] = unseen;
                }

                features[name] = Index([.. expected], withUnseen, includeMissing: true);
                rows = Math.Max(rows, c.Values.Sum());
            }
        }

        return new DriftView(score, features, rows);
    }

    /// <summary>PSI over the baseline's bins, plus a "missing" bin expected at 0 (floored like an empty bin) when asked.</summary>
    private static double Index(double[] expected, Dictionary<int, long> counts, bool includeMissing)
    {
        var bins = expected.Length + (includeMissing ? 1 : 0);
        var e = new double[bins];
        var a = new long[bins];
        expected.CopyTo(e, 0);
        foreach (var (bin, rows) in counts)
        {
            var slot = bin == MissingBin ? (includeMissing ? bins - 1 : -1) : bin;
            if (slot >= 0 && slot < bins)
            {
                a[slot] += rows;
            }
        }

        return PopulationStability.IndexFromCounts(e, a);
    }

    /// <summary>Counts of one version and hour, added under a lock per request; closed once let go, so no add is lost.</summary>
    private sealed class HourCounts(Plan plan)
    {
        private readonly Lock _lock = new();
        private long[] _counts = new long[plan.Slots];
        private bool _dirty;
        private bool _closed;

        public Plan Plan => plan;

        /// <summary>Adds a request's counts; false when the tally was let go (the caller makes a new one).</summary>
        public bool TryAdd(long[] counts)
        {
            lock (_lock)
            {
                if (_closed)
                {
                    return false;
                }

                Sum(counts);
                return true;
            }
        }

        /// <summary>Puts back counts a failed flush took (never refused: a tally is closed only by a flush).</summary>
        public void PutBack(long[] counts)
        {
            lock (_lock)
            {
                Sum(counts);
            }
        }

        /// <summary>Closes the tally when it holds nothing the store lacks; true when it did.</summary>
        public bool TryClose()
        {
            lock (_lock)
            {
                _closed = !_dirty;
                return _closed;
            }
        }

        private void Sum(long[] counts)
        {
            for (var i = 0; i < counts.Length; i++)
            {
                _counts[i] += counts[i];
            }

            _dirty = true;
        }

        public long[]? Take()
        {
            lock (_lock)
            {
                if (!_dirty)
                {
                    return null;
                }

                var taken = _counts;
                _counts = new long[plan.Slots];
                _dirty = false;
                return taken;
            }
        }
    }

    /// <summary>Where each series' bins sit in a version's count array, and how a value finds its bin.</summary>
    internal sealed class Plan
    {
        private readonly double[]? _scoreEdges;
        private readonly List<(string Series, int Bin, int Slot)> _slots = [];

        private Plan(CompiledModel model, BaselineSpec baseline)
        {
            Model = model;
            var slot = 0;
            if (baseline.LinearPredictor is { } lp)
            {
                _scoreEdges = [.. lp.Edges];
                for (var b = 0; b <= _scoreEdges.Length; b++)
                {
                    _slots.Add((ScoreSeries, b, slot++));
                }
            }

            Features = new FeatureBins?[model.FeatureCount];
            for (var f = 0; f < model.FeatureCount; f++)
            {
                var name = model.FeatureNames[f];
                if (baseline.Numeric.TryGetValue(name, out var bins))
                {
                    Features[f] = FeatureBins.Numeric([.. bins.Edges], slot);
                }
                else if (baseline.Levels.TryGetValue(name, out var levels) && model.FeatureKindOf(f) == FeatureKind.Categorical)
                {
                    var sorted = levels.Keys.Order(StringComparer.Ordinal).ToList();
                    Features[f] = FeatureBins.Categorical([.. model.Levels(f).Select(l => sorted.IndexOf(l))], sorted, slot);
                }
                else
                {
                    continue;
                }

                var fb = Features[f]!;
                for (var b = 0; b < fb.Bins; b++)
                {
                    _slots.Add((FeaturePrefix + name, b, slot + b));
                }

                _slots.Add((FeaturePrefix + name, UnseenBin, slot + fb.Unseen));
                _slots.Add((FeaturePrefix + name, MissingBin, slot + fb.Missing));
                slot += fb.Width;
            }

            Slots = slot;
        }

        public CompiledModel Model { get; }
        public FeatureBins?[] Features { get; }
        public int Slots { get; }

        public static Plan? For(CompiledModel model) =>
            model.Document.Baseline is { } baseline && (baseline.LinearPredictor is not null || baseline.Numeric.Count > 0 || baseline.Levels.Count > 0)
                ? new Plan(model, baseline)
                : null;

        public void CountScore(long[] counts, double eta)
        {
            if (_scoreEdges is not null)
            {
                counts[PopulationStability.Bin(_scoreEdges, eta)]++;
            }
        }

        public IEnumerable<(string Series, int Bin, int Slot)> SlotMap() => _slots;
    }

    /// <summary>One feature's bins inside the count array: its baseline bins, then "unseen", then "missing".</summary>
    internal sealed class FeatureBins
    {
        private double[]? _edges;
        private int[]? _levelBin;
        private List<string>? _levels;

        public int Offset { get; private init; }
        public int Bins { get; private init; }
        public int Unseen => Bins;
        public int Missing => Bins + 1;
        public int Width => Bins + 2;

        public static FeatureBins Numeric(double[] edges, int offset) => new() { _edges = edges, Offset = offset, Bins = edges.Length + 1 };

        public static FeatureBins Categorical(int[] levelBin, List<string> levels, int offset) =>
            new() { _levelBin = levelBin, _levels = levels, Offset = offset, Bins = levels.Count };

        public void CountDense(long[] counts, double value)
        {
            if (double.IsNaN(value))
            {
                counts[Offset + Missing]++;
            }
            else if (_edges is not null)
            {
                counts[Offset + PopulationStability.Bin(_edges, value)]++;
            }
            else
            {
                var code = (int)value;
                var bin = code == value && code >= 0 && code < _levelBin!.Length ? _levelBin[code] : -1;
                counts[Offset + (bin >= 0 ? bin : Unseen)]++;
            }
        }

        public void CountNamed(long[] counts, FeatureValue value)
        {
            if (value.Kind == FeatureValueKind.Number && double.IsFinite(value.Number) && _edges is not null)
            {
                counts[Offset + PopulationStability.Bin(_edges, value.Number)]++;
            }
            else if (value.Kind == FeatureValueKind.Text && _levels is not null)
            {
                var bin = _levels.IndexOf(value.Text!);
                counts[Offset + (bin >= 0 ? bin : Unseen)]++;
            }
            else
            {
                counts[Offset + Missing]++;
            }
        }
    }
}
