using System.Collections.Concurrent;
using System.Runtime.CompilerServices;
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
public sealed class DriftTracker(IDriftCountStore store, TimeProvider time)
{
    /// <summary>The series of the linear predictor (a name the model file keeps from features).</summary>
    public const string ScoreSeries = ModelFile.ModelDocument.LinearPredictorSeries;

    /// <summary>Bin of a categorical value the baseline does not list.</summary>
    public const int UnseenBin = -1;

    /// <summary>Bin of a missing value.</summary>
    public const int MissingBin = -2;

    private const string FeaturePrefix = "feature:";

    private readonly ConditionalWeakTable<CompiledModel, Plan?> _plans = [];
    private readonly ConcurrentDictionary<(string Model, string Version, long Hour), HourCounts> _pending = new();

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

        public void Commit()
        {
            if (_rows > 0)
            {
                _owner._pending.GetOrAdd(_key, _ => new HourCounts(_plan)).Add(_counts);
            }
        }
    }

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

        if (counts.Count == 0)
        {
            return;
        }

        try
        {
            await store.AddDriftCountsAsync(counts, cancellationToken).ConfigureAwait(false);
        }
        catch
        {
            foreach (var (key, snapshot) in taken)
            {
                _pending[key].Add(snapshot); // put back: counted again at the next flush
            }

            throw;
        }

        foreach (var (key, _) in taken)
        {
            if (key.Hour < (time.GetUtcNow().ToUnixTimeMilliseconds() / 3_600_000) - 1 && _pending.TryGetValue(key, out var hour) && hour.IsEmpty)
            {
                _pending.TryRemove(key, out _);
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

    /// <summary>Counts of one version and hour, added under a lock per request.</summary>
    private sealed class HourCounts(Plan plan)
    {
        private readonly Lock _lock = new();
        private long[] _counts = new long[plan.Slots];
        private bool _dirty;

        public Plan Plan => plan;

        public bool IsEmpty
        {
            get
            {
                lock (_lock)
                {
                    return !_dirty;
                }
            }
        }

        public void Add(long[] counts)
        {
            lock (_lock)
            {
                for (var i = 0; i < counts.Length; i++)
                {
                    _counts[i] += counts[i];
                }

                _dirty = true;
            }
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
