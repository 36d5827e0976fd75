using System.Buffers;
using System.Globalization;
using Scorer.Application.Models;
using Scorer.Engine;
using Scorer.Engine.Scoring;
using Scorer.Monitor.Reporting;
using Scorer.Registry;
using Scorer.Store;

namespace Scorer.Application.Scoring;

/// <summary>
/// The rows of one score request as a transport read them (a protobuf message, a JSON body, a CSV file, a stream
/// message): how many, each row's key, and each row bound onto named values. The pipeline never sees the format.
/// </summary>
public interface IScoreRows
{
    int Count { get; }

    /// <summary>The key the caller gave row <paramref name="row"/>, or null (an empty key is no key).</summary>
    string? Key(int row);

    /// <summary>
    /// Binds row <paramref name="row"/> onto <paramref name="values"/> (at most its length; more fields than that is an
    /// error); false with the field and reason when the row cannot be read (the row fails alone, code bad_value).
    /// </summary>
    bool TryBind(int row, CompiledModel model, Span<NamedValue> values, out int count, out string? field, out string? reason);
}

/// <summary>Writes a score response in one format (protobuf message, direct JSON, CSV), row by row, in row order.</summary>
public interface IScoreWriter
{
    /// <summary>Row <paramref name="row"/> scored. <paramref name="order"/> lists the terms to report, in report order.</summary>
    void Scored(int row, Guid id, string? key, in ScoredRow result, CompiledModel model, ReadOnlySpan<int> order, ReadOnlySpan<double> contributions,
        ReadOnlySpan<RowWarning> warnings);

    /// <summary>Row <paramref name="row"/> could not be scored: its code (<see cref="RowMessages"/>), field and reason.</summary>
    void Failed(int row, Guid id, string? key, string code, string field, string reason);
}

/// <summary>Writes a dense score response: every row's values, then the error of each row that failed.</summary>
public interface IDenseScoreWriter
{
    void Row(int row, Guid id, in ScoredRow result);

    void Failed(int row, string code, string field, string reason);
}

/// <summary>What a score call resolved to before any row is read: the version, its model's entry, the band settings, the contributions asked for.</summary>
/// <param name="Contributions">How many of the largest contributions each row reports: 0 all (of the terms that vary), -1 none.</param>
public readonly record struct ScoreCall(LoadedVersion Version, ModelEntry Entry, ScoreSettings Settings, int Contributions);

/// <summary>
/// The one scoring pipeline every transport uses (gRPC, transcoded and direct REST, event streams): resolving the
/// version, the request's limits and keys, binding, scoring, counting rows and errors into the metrics, tallying the
/// drift bins, handing each scored row to the prediction log and the rows of a live version to its shadows, ordering
/// contributions. Transports read rows (<see cref="IScoreRows"/>) and write results (<see cref="IScoreWriter"/>).
/// Errors are <see cref="Grpc.Core.RpcException"/>s from <see cref="Errors"/>, whatever the transport.
/// </summary>
public sealed class ScoringPipeline(ModelCatalog catalog, PredictionLog log, ShadowScorer shadows, ScoringLimits limits, ScorerMetrics metrics, TimeProvider time,
    DriftTracker drift)
{
    // The warnings counter of each loaded version's model, looked up once rather than per request.
    private readonly System.Runtime.CompilerServices.ConditionalWeakTable<LoadedVersion, Prometheus.Counter.Child> _warned = [];

    public ScoringLimits Limits => limits;

    public ScorerMetrics Metrics => metrics;

    public ModelCatalog Catalog => catalog;

    /// <summary>
    /// Resolves a call before its rows are read: the version (named, or the live one), the row count against
    /// <see cref="ScoringLimits.MaxRows"/>, one key per row or none (each one the store can keep), the confidence level.
    /// </summary>
    public ScoreCall Prepare(string? model, string? version, int rows, IReadOnlyList<string?>? keys, double? level, int? contributions)
    {
        var resolved = catalog.LiveOrNamed(model, version, out var entry);
        if (rows > limits.MaxRows)
        {
            throw Errors.TooMuch("rows", $"{rows} rows in one request; at most {limits.MaxRows} (Scorer:Limits:MaxRows)");
        }

        CheckKeys(keys, rows);
        return new ScoreCall(resolved, entry, Settings(level), contributions ?? 0);
    }

    /// <summary>The band settings for an optional confidence level.</summary>
    public static ScoreSettings Settings(double? level)
    {
        if (level is not { } l)
        {
            return ScoreSettings.Default;
        }

        if (!(l > 0 && l < 1))
        {
            throw Errors.Invalid("level", $"{l.ToString(CultureInfo.InvariantCulture)} is not a confidence level; give a number strictly between 0 and 1, e.g. 0.95");
        }

        return ScoreSettings.WithBand(l);
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

    /// <summary>Scores every row of a call, writing each result as it goes.</summary>
    public void Score<TRows, TWriter>(in ScoreCall call, ref TRows rows, ref TWriter writer)
        where TRows : IScoreRows, allows ref struct
        where TWriter : IScoreWriter, allows ref struct
    {
        var version = call.Version;
        var model = version.Compiled;
        var rowCount = rows.Count;
        var now = time.GetUtcNow();
        var contributions = ArrayPool<double>.Shared.Rent(model.TermCount);
        var warnings = ArrayPool<RowWarning>.Shared.Rent(Math.Max(1, model.MaxWarningsPerRow));
        var order = ArrayPool<int>.Shared.Rent(model.TermCount);
        var values = ArrayPool<NamedValue>.Shared.Rent(limits.MaxFeaturesPerRow);
        var shadowing = call.Entry.Shadows.Length > 0 && version.Stage == Stage.Live;
        var shadowRows = shadowing ? new NamedValue[]?[rowCount] : null;
        var ids = shadowing ? new Guid[rowCount] : null;
        var keys = shadowing ? new string?[rowCount] : null;
        int scored = 0, warned = 0;
        var tally = drift.Begin(version, now);
        try
        {
            var bindInto = values.AsSpan(0, limits.MaxFeaturesPerRow);
            for (var i = 0; i < rowCount; i++)
            {
                var key = rows.Key(i);
                if (key is { Length: 0 })
                {
                    key = null;
                }

                var id = PredictionIds.Next(now);
                if (key is not null && key.Length > limits.MaxStringLength)
                {
                    Fail(ref writer, version, i, id, key, RowMessages.BadKeyCode, $"keys[{i}]", $"longer than {limits.MaxStringLength} characters");
                    continue;
                }

                if (!rows.TryBind(i, model, bindInto, out var count, out var bindField, out var bindReason))
                {
                    Fail(ref writer, version, i, id, key, RowMessages.BadValueCode, bindField!, bindReason!);
                    continue;
                }

                var row = values.AsSpan(0, count);
                var r = model.Score(row, call.Settings, call.Contributions >= 0 ? contributions.AsSpan(0, model.TermCount) : default,
                    warnings.AsSpan(0, model.MaxWarningsPerRow)); // contributions only when asked for
                if (r.Failed)
                {
                    Fail(ref writer, version, i, id, key, RowMessages.Code(r.Error.Kind), RowMessages.Field(model, r.Error), RowMessages.Describe(model, r.Error));
                    continue;
                }

                scored++;
                warned += r.WarningCount > 0 ? 1 : 0;
                tally?.Add(r.Eta, row);
                var listed = call.Contributions >= 0 ? model.OrderContributions(contributions.AsSpan(0, model.TermCount), call.Contributions, order) : 0;
                writer.Scored(i, id, key, r, model, order.AsSpan(0, listed), contributions.AsSpan(0, model.TermCount),
                    warnings.AsSpan(0, Math.Min(r.WarningCount, model.MaxWarningsPerRow)));
                if (log.Enabled)
                {
                    log.TryEnqueue(new PredictionRecord(id, version.Model, version.Version, version.Stage, now, key, r.Eta, r.Probability, LoggedFeatures.Json(model, row)));
                }

                if (shadowRows is not null)
                {
                    shadowRows[i] = row.ToArray();
                    ids![i] = id;
                    keys![i] = key;
                }
            }
        }
        finally
        {
            ArrayPool<double>.Shared.Return(contributions);
            ArrayPool<RowWarning>.Shared.Return(warnings);
            ArrayPool<int>.Shared.Return(order);
            ArrayPool<NamedValue>.Shared.Return(values, clearArray: true);
        }

        tally?.Commit();
        Count(version, scored, warned);
        if (shadowRows is not null)
        {
            Shadow(call.Entry, shadowRows, ids!, keys!, now);
        }
    }

    /// <summary>
    /// The column of each named feature in a dense message (the model's feature index per column), or the error
    /// naming the column: empty names, a name the model lacks, a name given twice.
    /// </summary>
    public static int[] DenseColumns(LoadedVersion version, IReadOnlyList<string> names)
    {
        var model = version.Compiled;
        if (names.Count == 0)
        {
            throw Errors.Invalid("features", "no feature names given");
        }

        var columnOf = new int[names.Count];
        var columnFor = new int[model.FeatureCount];
        for (var c = 0; c < names.Count; c++)
        {
            columnOf[c] = model.FeatureIndexOf(names[c]);
            if (columnOf[c] < 0)
            {
                throw Errors.Invalid($"features[{c}]", $"'{Errors.Echo(names[c])}' is not a feature of {version.Model} {version.Version} ({string.Join(", ", model.FeatureNames)})");
            }

            if (columnFor[columnOf[c]] > 0)
            {
                throw Errors.Invalid($"features[{c}]", $"'{names[c]}' is named twice (also features[{columnFor[columnOf[c]] - 1}]); name each feature once");
            }

            columnFor[columnOf[c]] = c + 1;
        }

        return columnOf;
    }

    /// <summary>The rows of a dense message: the values' count checked against the limits and the columns.</summary>
    public int DenseRows(int values, int columns, IReadOnlyList<string?>? keys)
    {
        if (values > limits.MaxDenseValues)
        {
            throw Errors.TooMuch("values", $"{values} values in one message; at most {limits.MaxDenseValues} (Scorer:Limits:MaxDenseValues)");
        }

        if (values % columns != 0)
        {
            throw Errors.Invalid("values", $"{values} values are not a whole number of rows of {columns} features");
        }

        var rows = values / columns;
        if (rows > limits.MaxRows * 10)
        {
            throw Errors.TooMuch("values", $"{rows} rows in one message; at most {limits.MaxRows * 10} (ten times Scorer:Limits:MaxRows)");
        }

        CheckKeys(keys, rows);
        return rows;
    }

    /// <summary>
    /// Scores a dense matrix (row-major, the model's features in its own order, NaN for a missing numeric value) in one
    /// batch, with the same counting, drift tallies and logging as <see cref="Score{TRows, TWriter}"/>; dense rows are not shadowed.
    /// </summary>
    public void ScoreDense<TWriter>(LoadedVersion version, ReadOnlySpan<double> dense, int rows, IReadOnlyList<string>? keys, in ScoreSettings settings, ref TWriter writer)
        where TWriter : IDenseScoreWriter, allows ref struct
    {
        var model = version.Compiled;
        var f = model.FeatureCount;
        var results = ArrayPool<ScoredRow>.Shared.Rent(rows);
        try
        {
            model.ScoreBatch(dense, results.AsSpan(0, rows), settings);
            var now = time.GetUtcNow();
            int scored = 0, warned = 0;
            var tally = drift.Begin(version, now);
            for (var r = 0; r < rows; r++)
            {
                ref readonly var s = ref results[r];
                var id = PredictionIds.Next(now);
                writer.Row(r, id, s);
                if (s.Failed)
                {
                    var code = RowMessages.Code(s.Error.Kind);
                    writer.Failed(r, code, RowMessages.Field(model, s.Error), RowMessages.Describe(model, s.Error));
                    CountRowError(version, code);
                    continue;
                }

                scored++;
                warned += s.WarningCount > 0 ? 1 : 0;
                var features = dense.Slice(r * f, f);
                tally?.Add(s.Eta, features);
                if (log.Enabled)
                {
                    var key = keys is { Count: > 0 } && keys[r].Length > 0 ? keys[r] : null;
                    log.TryEnqueue(new PredictionRecord(id, version.Model, version.Version, version.Stage, now, key, s.Eta, s.Probability, LoggedFeatures.Json(model, features)));
                }
            }

            tally?.Commit();
            Count(version, scored, warned);
        }
        finally
        {
            ArrayPool<ScoredRow>.Shared.Return(results);
        }
    }

    private void Fail<TWriter>(ref TWriter writer, LoadedVersion version, int row, Guid id, string? key, string code, string field, string reason)
        where TWriter : IScoreWriter, allows ref struct
    {
        CountRowError(version, code);
        writer.Failed(row, id, key, code, field, reason);
    }

    /// <summary>Counts one message's rows into the metrics.</summary>
    private void Count(LoadedVersion version, int scored, int warned)
    {
        if (scored > 0)
        {
            metrics.CountScored(version, scored);
        }

        if (warned > 0)
        {
            _warned.GetValue(version, v => metrics.RowWarnings.WithLabels(v.Model)).Inc(warned);
        }
    }

    /// <summary>Counts a row that could not be scored under its code (<see cref="RowMessages.Code(RowErrorKind)"/>, bad_value, bad_key).</summary>
    private void CountRowError(LoadedVersion version, string code) => metrics.RowErrors.WithLabels(version.Model, code).Inc();

    /// <summary>Hands the rows a live version scored to its shadow versions.</summary>
    private void Shadow(ModelEntry entry, NamedValue[]?[] rows, Guid[] liveIds, string?[] keys, DateTimeOffset scoredAt)
    {
        var scored = Enumerable.Range(0, rows.Length).Where(i => rows[i] is not null).ToArray();
        if (scored.Length > 0)
        {
            shadows.Enqueue(new ShadowWork(entry.Shadows, [.. scored.Select(i => rows[i]!)], [.. scored.Select(i => liveIds[i])], [.. scored.Select(i => keys[i])],
                scoredAt));
        }
    }
}
