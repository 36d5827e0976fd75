using System.Buffers;
using System.Globalization;
using System.Text.Json;
using Google.Protobuf;
using Google.Protobuf.WellKnownTypes;
using Grpc.Core;
using Scorer.Engine;
using Scorer.Engine.Scoring;
using Scorer.ModelFile;
using Scorer.Registry;
using Scorer.Store;
using Scorer.Transport.V1;

namespace Scorer.Transport.Services;

/// <summary>
/// Scoring over gRPC (and REST through transcoding): reads the registry's snapshot once per message, scores every row
/// with one version, logs each scored row behind the request, and hands the rows to the shadow versions.
/// </summary>
public sealed class ScoringService(ScoringCore core) : Scoring.ScoringBase
{
    private readonly ScoringLimits limits = core.Limits;
    private readonly PredictionLog log = core.Log;
    private readonly TimeProvider time = core.Time;

    public override Task<ScoreResponse> Score(ScoreRequest request, ServerCallContext context) => Task.FromResult(ScoreMessage(request));

    public override async Task ScoreStream(IAsyncStreamReader<ScoreRequest> requestStream, IServerStreamWriter<ScoreResponse> responseStream, ServerCallContext context)
    {
        await foreach (var request in requestStream.ReadAllAsync(context.CancellationToken).ConfigureAwait(false))
        {
            await responseStream.WriteAsync(ScoreMessage(request), context.CancellationToken).ConfigureAwait(false);
        }
    }

    public override Task<DenseScoreResponse> ScoreDense(DenseScoreRequest request, ServerCallContext context) =>
        Task.FromResult(ScoreDenseMessage(request, null));

    public override async Task ScoreDenseStream(IAsyncStreamReader<DenseScoreRequest> requestStream, IServerStreamWriter<DenseScoreResponse> responseStream, ServerCallContext context)
    {
        IReadOnlyList<string>? features = null;
        await foreach (var request in requestStream.ReadAllAsync(context.CancellationToken).ConfigureAwait(false))
        {
            if (request.Features.Count > 0)
            {
                features = [.. request.Features];
            }

            await responseStream.WriteAsync(ScoreDenseMessage(request, features), context.CancellationToken).ConfigureAwait(false);
        }
    }

    internal ScoreResponse ScoreMessage(ScoreRequest request)
    {
        var version = core.Resolve(request.Model, request.Version, out var entry);
        var model = version.Compiled;
        core.CheckRowCount(request.Rows.Count);
        ScoringCore.CheckKeys(request.Keys, request.Rows.Count);
        var settings = ScoringCore.Settings(request.HasLevel, request.Level, "level");
        var topContributions = request.HasContributions ? request.Contributions : 0;
        var now = time.GetUtcNow();
        var response = new ScoreResponse { Model = version.Model, Version = version.Version };
        var contributions = new double[model.TermCount];
        var warnings = new Engine.Scoring.RowWarning[model.MaxWarningsPerRow];
        var rowsForShadow = entry.Shadows.Length > 0 ? new NamedValue[]?[request.Rows.Count] : null;
        var ids = new Guid[request.Rows.Count];
        var keys = new string?[request.Rows.Count];
        int scoredRows = 0, warnedRows = 0;
        var tally = core.Drift.Begin(version, now);
        for (var i = 0; i < request.Rows.Count; i++)
        {
            var key = request.Keys.Count > 0 ? request.Keys[i] : null;
            keys[i] = string.IsNullOrEmpty(key) ? null : key;
            ids[i] = PredictionIds.Next(now);
            var result = new RowResult { Id = ids[i].ToString(), Key = key ?? "", Error = Value.ForNull() };
            response.Results.Add(result);
            if (key is { Length: > 0 } && key.Length > limits.MaxStringLength)
            {
                result.Error = RowErrorValue(RowMessages.BadKeyCode, $"keys[{i}]", $"longer than {limits.MaxStringLength} characters");
                core.CountRowError(version, RowMessages.BadKeyCode);
                continue;
            }

            var row = request.Rows[i];
            if (!TryBind(row, i, out var values, out var bindError))
            {
                result.Error = bindError!;
                core.CountRowError(version, RowMessages.BadValueCode);
                continue;
            }

            var r = model.Score(values, settings, contributions, warnings);
            if (r.Failed)
            {
                result.Error = RowErrorValue(RowMessages.Code(r.Error.Kind), RowMessages.Field(model, r.Error), RowMessages.Describe(model, r.Error));
                core.CountRowError(version, RowMessages.Code(r.Error.Kind));
                continue;
            }

            scoredRows++;
            warnedRows += r.WarningCount > 0 ? 1 : 0;
            tally?.Add(r.Eta, values);
            Fill(result, r, model, contributions, warnings, topContributions);
            if (log.Enabled)
            {
                log.TryEnqueue(new PredictionRecord(ids[i], version.Model, version.Version, version.Stage, now, keys[i], r.Eta, r.Probability,
                    LoggedFeatures.Json(model, values)));
            }

            if (rowsForShadow is not null)
            {
                rowsForShadow[i] = values;
            }
        }

        tally?.Commit();
        core.Count(version, scoredRows, warnedRows);
        if (rowsForShadow is not null)
        {
            core.Shadow(version, entry, rowsForShadow, ids, keys, now);
        }

        return response;
    }

    internal DenseScoreResponse ScoreDenseMessage(DenseScoreRequest request, IReadOnlyList<string>? streamFeatures)
    {
        var version = core.Resolve(request.Model, request.Version, out _);
        var model = version.Compiled;
        var names = request.Features.Count > 0 ? (IReadOnlyList<string>)request.Features : streamFeatures
            ?? throw Errors.Invalid("features", "name the feature of each column (on a stream, in the first message at least)");
        if (names.Count == 0)
        {
            throw Errors.Invalid("features", "no feature names given");
        }

        if (request.Values.Count > limits.MaxDenseValues)
        {
            throw Errors.TooMuch("values", $"{request.Values.Count} values in one message; at most {limits.MaxDenseValues}");
        }

        if (request.Values.Count % names.Count != 0)
        {
            throw Errors.Invalid("values", $"{request.Values.Count} values are not a whole number of rows of {names.Count} features");
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

        var rows = request.Values.Count / names.Count;
        if (rows > limits.MaxRows * 10)
        {
            throw Errors.TooMuch("values", $"{rows} rows in one message; at most {limits.MaxRows * 10}");
        }

        ScoringCore.CheckKeys(request.Keys, rows);

        var settings = ScoringCore.Settings(request.HasLevel, request.Level, "level");
        var f = model.FeatureCount;
        var matrix = ArrayPool<double>.Shared.Rent(rows * f);
        var results = ArrayPool<ScoredRow>.Shared.Rent(rows);
        try
        {
            var dense = matrix.AsSpan(0, rows * f);
            dense.Fill(double.NaN);
            var values = request.Values;
            for (var r = 0; r < rows; r++)
            {
                for (var c = 0; c < names.Count; c++)
                {
                    dense[(r * f) + columnOf[c]] = values[(r * names.Count) + c];
                }
            }

            model.ScoreBatch(dense, results.AsSpan(0, rows), settings);
            var now = time.GetUtcNow();
            var response = new DenseScoreResponse { Model = version.Model, Version = version.Version };
            int scoredRows = 0, warnedRows = 0;
            var tally = core.Drift.Begin(version, now);
            for (var r = 0; r < rows; r++)
            {
                ref readonly var s = ref results[r];
                var id = PredictionIds.Next(now);
                response.Ids.Add(id.ToString());
                response.Eta.Add(s.Eta);
                response.Se.Add(s.Se);
                response.Probability.Add(s.Probability);
                response.Lower.Add(s.Lower);
                response.Upper.Add(s.Upper);
                response.Flag.Add(s.Flag);
                response.WarningCount.Add(s.WarningCount);
                if (s.Failed)
                {
                    response.Errors.Add(new DenseRowError { Row = r, Code = RowMessages.Code(s.Error.Kind), Field = RowMessages.Field(model, s.Error), Reason = RowMessages.Describe(model, s.Error) });
                    core.CountRowError(version, RowMessages.Code(s.Error.Kind));
                    continue;
                }

                scoredRows++;
                warnedRows += s.WarningCount > 0 ? 1 : 0;
                tally?.Add(s.Eta, dense.Slice(r * f, f));

                if (log.Enabled)
                {
                    var key = request.Keys.Count > 0 && request.Keys[r].Length > 0 ? request.Keys[r] : null;
                    log.TryEnqueue(new PredictionRecord(id, version.Model, version.Version, version.Stage, now, key, s.Eta, s.Probability,
                        LoggedFeatures.Json(model, dense.Slice(r * f, f))));
                }
            }

            tally?.Commit();
            core.Count(version, scoredRows, warnedRows);
            return response;
        }
        finally
        {
            ArrayPool<double>.Shared.Return(matrix);
            ArrayPool<ScoredRow>.Shared.Return(results);
        }
    }

    private bool TryBind(Struct row, int index, out NamedValue[] values, out Value? error)
    {
        values = [];
        error = null;
        if (row is null)
        {
            error = RowErrorValue(RowMessages.BadValueCode, $"rows[{index}]", "the row is not a JSON object");
            return false;
        }

        if (row.Fields.Count > limits.MaxFeaturesPerRow)
        {
            error = RowErrorValue(RowMessages.BadValueCode, $"rows[{index}]", $"{row.Fields.Count} fields; at most {limits.MaxFeaturesPerRow}");
            return false;
        }

        values = new NamedValue[row.Fields.Count];
        var i = 0;
        foreach (var (name, value) in row.Fields)
        {
            FeatureValue v;
            switch (value.KindCase)
            {
                case Value.KindOneofCase.NumberValue:
                    v = FeatureValue.Of(value.NumberValue);
                    break;
                case Value.KindOneofCase.StringValue:
                    if (value.StringValue.Length > limits.MaxStringLength)
                    {
                        error = RowErrorValue(RowMessages.BadValueCode, name, $"longer than {limits.MaxStringLength} characters");
                        return false;
                    }

                    v = FeatureValue.Of(value.StringValue);
                    break;
                case Value.KindOneofCase.BoolValue:
                    v = FeatureValue.Of(value.BoolValue ? 1.0 : 0.0);
                    break;
                case Value.KindOneofCase.NullValue:
                case Value.KindOneofCase.None:
                    v = FeatureValue.Missing;
                    break;
                default:
                    error = RowErrorValue(RowMessages.BadValueCode, name, "expects a number or a string, got " + (value.KindCase == Value.KindOneofCase.ListValue ? "a list" : "an object"));
                    return false;
            }

            values[i++] = new NamedValue(name, v);
        }

        return true;
    }

    /// <summary>A row's error as the JSON object {"code", "field", "reason"}.</summary>
    internal static Value RowErrorValue(string code, string field, string reason) => Value.ForStruct(new Struct
    {
        Fields = { ["code"] = Value.ForString(code), ["field"] = Value.ForString(field), ["reason"] = Value.ForString(reason) },
    });

    private static void Fill(RowResult result, in ScoredRow r, CompiledModel model, double[] contributions, Engine.Scoring.RowWarning[] warnings, int top)
    {
        result.Eta = r.Eta;
        result.Probability = r.Probability;
        if (!double.IsNaN(r.Se))
        {
            result.Se = r.Se;
            result.Lower = r.Lower;
            result.Upper = r.Upper;
        }

        if (r.FlagValue is { } flag)
        {
            result.Flag = flag;
        }

        if (top >= 0)
        {
            Span<int> order = model.TermCount <= 256 ? stackalloc int[model.TermCount] : new int[model.TermCount];
            var listed = model.OrderContributions(contributions, top, order);
            foreach (var j in order[..listed])
            {
                result.Contributions.Add(new Contribution { Term = model.TermNames[j], Value = contributions[j] });
            }
        }

        for (var w = 0; w < Math.Min(r.WarningCount, warnings.Length); w++)
        {
            result.Warnings.Add(new V1.RowWarning
            {
                Code = RowMessages.Code(warnings[w].Kind),
                Field = warnings[w].Feature >= 0 ? model.FeatureNames[warnings[w].Feature] : "",
                Message = RowMessages.Describe(model, warnings[w]),
            });
        }
    }
}
