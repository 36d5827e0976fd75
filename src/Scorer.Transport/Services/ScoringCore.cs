using System.Globalization;
using Scorer.Engine.Scoring;
using Scorer.Registry;
using Scorer.Store;

namespace Scorer.Transport.Services;

/// <summary>
/// What every scoring transport shares (gRPC messages, dense messages, the direct REST reader): finding the version,
/// the confidence level, the limits, counting rows into the metrics and handing rows to the log and the shadows.
/// Errors are <see cref="Grpc.Core.RpcException"/>s from <see cref="Errors"/>, whatever the transport.
/// </summary>
public sealed class ScoringCore(ModelRegistry registry, PredictionLog log, ShadowScorer shadows, ScoringLimits limits, ScorerMetrics metrics, TimeProvider time,
    Scorer.Monitor.Reporting.DriftTracker drift)
{
    // The labelled counters of each loaded version, looked up once rather than per request.
    private readonly System.Runtime.CompilerServices.ConditionalWeakTable<LoadedVersion, VersionCounters> _counters = [];

    public ScoringLimits Limits => limits;

    public PredictionLog Log => log;

    public ShadowScorer Shadows => shadows;

    public ScorerMetrics Metrics => metrics;

    public TimeProvider Time => time;

    /// <summary>Counts scored rows into the baseline's bins, for the PSI without labels.</summary>
    public Scorer.Monitor.Reporting.DriftTracker Drift => drift;

    /// <summary>The version a request scores with: the named one, or the live one.</summary>
    public LoadedVersion Resolve(string modelName, string? versionName, out ModelEntry entry)
    {
        if (string.IsNullOrEmpty(modelName))
        {
            throw Errors.Invalid("model", "name the model");
        }

        var snapshot = registry.Current;
        entry = snapshot.Find(modelName) ?? throw Errors.NotFound("model",
            $"no model '{Errors.Echo(modelName)}' is loaded" + (snapshot.Models.Count > 0 ? $" (loaded: {string.Join(", ", snapshot.Models.Keys)})" : ""));
        if (string.IsNullOrEmpty(versionName))
        {
            return entry.Live ?? throw Errors.Precondition("version", $"model '{modelName}' has no live version; name a version or promote one");
        }

        var e = entry;
        return entry.Find(versionName) ?? throw Errors.NotFound("version",
            $"model '{modelName}' has no version '{Errors.Echo(versionName)}' (loaded: {string.Join(", ", e.Versions.Select(v => v.Version))})");
    }

    /// <summary>The band settings for an optional confidence level.</summary>
    public static ScoreSettings Settings(bool hasLevel, double level, string field)
    {
        if (!hasLevel)
        {
            return ScoreSettings.Default;
        }

        if (!(level > 0 && level < 1))
        {
            throw Errors.Invalid(field, $"{level.ToString(CultureInfo.InvariantCulture)} is not a confidence level; give a number strictly between 0 and 1, e.g. 0.95");
        }

        return ScoreSettings.WithBand(level);
    }

    public void CheckRowCount(int rows)
    {
        if (rows > limits.MaxRows)
        {
            throw Errors.TooMuch("rows", $"{rows} rows in one request; at most {limits.MaxRows}");
        }
    }

    /// <summary>One key per row or none, and every key text the store can keep (else the request is refused naming the key).</summary>
    public static void CheckKeys(IReadOnlyList<string?>? keys, int rows)
    {
        var count = keys?.Count ?? 0;
        if (count != 0 && count != rows)
        {
            throw Errors.Invalid("keys", $"{count} keys for {rows} rows; give one key per row, or none");
        }

        for (var i = 0; i < count; i++)
        {
            if (StoreRules.Unstorable(keys![i]) is { } reason)
            {
                throw Errors.Invalid($"keys[{i}]", reason);
            }
        }
    }

    /// <summary>Counts one message's rows into the metrics.</summary>
    public void Count(LoadedVersion version, int scored, int warned)
    {
        var counters = _counters.GetValue(version, v => new VersionCounters(
            metrics.RowsScored.WithLabels(v.Model, v.Version, ModelsService.StageName(v.Stage)), metrics.RowWarnings.WithLabels(v.Model)));
        if (scored > 0)
        {
            counters.Scored.Inc(scored);
        }

        if (warned > 0)
        {
            counters.Warned.Inc(warned);
        }
    }

    private sealed record VersionCounters(Prometheus.Counter.Child Scored, Prometheus.Counter.Child Warned);

    /// <summary>Counts a row that could not be scored under its code (<see cref="RowMessages.Code(RowErrorKind)"/>, bad_value, bad_key).</summary>
    public void CountRowError(LoadedVersion version, string code) => metrics.RowErrors.WithLabels(version.Model, code).Inc();

    /// <summary>Hands the rows a live version scored to its shadow versions (nothing happens without shadows).</summary>
    public void Shadow(LoadedVersion version, ModelEntry entry, NamedValue[]?[] rows, Guid[] liveIds, string?[] keys, DateTimeOffset scoredAt)
    {
        if (entry.Shadows.Length == 0 || version.Stage != Stage.Live)
        {
            return;
        }

        var scored = Enumerable.Range(0, rows.Length).Where(i => rows[i] is not null).ToArray();
        if (scored.Length > 0)
        {
            shadows.Enqueue(new ShadowWork(entry.Shadows, [.. scored.Select(i => rows[i]!)], [.. scored.Select(i => liveIds[i])], [.. scored.Select(i => keys[i])],
                scoredAt));
        }
    }

}
