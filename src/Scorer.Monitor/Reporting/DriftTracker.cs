using System.Text;
using System.Text.Json;
using Scorer.ModelFile;
using Scorer.Monitor.Statistics;
using Scorer.Registry;
using Scorer.Store;

namespace Scorer.Monitor.Reporting;

/// <summary>The population stability of a window's scored rows against the model file's baseline, without labels.</summary>
public sealed record DriftView(double? Score, IReadOnlyDictionary<string, double> Features, long Rows);

/// <summary>
/// Counts logged predictions into per-hour bins of the model file's baseline (the linear predictor's deciles, each
/// numeric feature's bins, each categorical feature's levels plus "unseen" and "missing"), and turns a window's counts
/// into the population stability index (PSI, docs/monitoring.md). Runs on the prediction log's writer, after each
/// batch is stored.
/// </summary>
public sealed class DriftTracker(ModelRegistry registry)
{
    /// <summary>The series of the linear predictor.</summary>
    public const string ScoreSeries = "score";

    /// <summary>Bin of a categorical value the baseline does not list.</summary>
    public const int UnseenBin = -1;

    /// <summary>Bin of a missing value.</summary>
    public const int MissingBin = -2;

    private const string FeaturePrefix = "feature:";

    /// <summary>The drift counts of a batch of logged predictions (rows of versions without a baseline are skipped).</summary>
    public IReadOnlyList<DriftCount> Count(IReadOnlyList<PredictionRecord> batch)
    {
        var snapshot = registry.Current;
        var sums = new Dictionary<(string Model, string Version, long Hour, string Series, int Bin), long>();
        foreach (var row in batch)
        {
            if (snapshot.Find(row.Model)?.Find(row.Version)?.Document.Baseline is not { } baseline)
            {
                continue;
            }

            var hour = row.ScoredAt.ToUnixTimeMilliseconds() / 3_600_000;
            if (baseline.LinearPredictor is { } lp)
            {
                Add(sums, row, hour, ScoreSeries, PopulationStability.Bin(lp.Edges.AsSpan(), row.Eta));
            }

            if (baseline.Numeric.Count > 0 || baseline.Levels.Count > 0)
            {
                CountFeatures(sums, row, hour, baseline);
            }
        }

        return [.. sums.Select(s => new DriftCount(s.Key.Model, s.Key.Version, DateTimeOffset.FromUnixTimeMilliseconds(s.Key.Hour * 3_600_000),
            s.Key.Series, s.Key.Bin, s.Value))];
    }

    private static void CountFeatures(Dictionary<(string, string, long, string, int), long> sums, PredictionRecord row, long hour, BaselineSpec baseline)
    {
        var seen = new HashSet<string>(StringComparer.Ordinal);
        var reader = new Utf8JsonReader(Encoding.UTF8.GetBytes(row.FeaturesJson));
        if (!reader.Read() || reader.TokenType != JsonTokenType.StartObject)
        {
            return;
        }

        while (reader.Read() && reader.TokenType == JsonTokenType.PropertyName)
        {
            var name = reader.GetString()!;
            reader.Read();
            if (baseline.Numeric.TryGetValue(name, out var bins) && seen.Add(name))
            {
                var bin = reader.TokenType switch
                {
                    JsonTokenType.Number => PopulationStability.Bin(bins.Edges.AsSpan(), reader.GetDouble()),
                    JsonTokenType.True => PopulationStability.Bin(bins.Edges.AsSpan(), 1),
                    JsonTokenType.False => PopulationStability.Bin(bins.Edges.AsSpan(), 0),
                    _ => MissingBin,
                };
                Add(sums, row, hour, FeaturePrefix + name, bin);
            }
            else if (baseline.Levels.TryGetValue(name, out var levels) && seen.Add(name))
            {
                var bin = reader.TokenType == JsonTokenType.String ? LevelBin(levels, reader.GetString()!) : MissingBin;
                Add(sums, row, hour, FeaturePrefix + name, bin);
            }

            reader.Skip();
        }

        foreach (var name in baseline.Numeric.Keys.Concat(baseline.Levels.Keys))
        {
            if (!seen.Contains(name))
            {
                Add(sums, row, hour, FeaturePrefix + name, MissingBin);
            }
        }
    }

    /// <summary>A level's bin: its position among the baseline's levels in ordinal order, or <see cref="UnseenBin"/>.</summary>
    private static int LevelBin(IReadOnlyDictionary<string, double> levels, string level)
    {
        if (!levels.ContainsKey(level))
        {
            return UnseenBin;
        }

        var i = 0;
        foreach (var name in levels.Keys.Order(StringComparer.Ordinal))
        {
            if (name == level)
            {
                return i;
            }

            i++;
        }

        return UnseenBin;
    }

    private static void Add(Dictionary<(string, string, long, string, int), long> sums, PredictionRecord row, long hour, string series, int bin)
    {
        var key = (row.Model, row.Version, hour, series, bin);
        sums[key] = sums.GetValueOrDefault(key) + 1;
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
}
