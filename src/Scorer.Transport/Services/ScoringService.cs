using Microsoft.AspNetCore.Authorization;
using System.Buffers;
using Google.Protobuf.Collections;
using Google.Protobuf.WellKnownTypes;
using Grpc.Core;
using Scorer.Application.Scoring;
using Scorer.Engine;
using Scorer.Engine.Scoring;
using Scorer.Registry;
using Scorer.Transport.V1;

namespace Scorer.Transport.Services;

/// <summary>
/// Scoring over gRPC (and REST through transcoding): reads each message's rows (<see cref="MessageRows"/>), runs them
/// through the <see cref="ScoringPipeline"/> and writes the protobuf response (<see cref="MessageWriter"/>).
/// </summary>
[Authorize(Policy = Roles.Score)]
public sealed class ScoringService(ScoringPipeline pipeline) : Scoring.ScoringBase
{
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

    /// <summary>Scores one <see cref="ScoreRequest"/> (also the protobuf message of the event streams).</summary>
    public ScoreResponse ScoreMessage(ScoreRequest request)
    {
        var call = pipeline.Prepare(request.Model, request.Version, request.Rows.Count, request.Keys, request.HasLevel ? request.Level : null,
            request.HasContributions ? request.Contributions : null);
        var response = new ScoreResponse { Model = call.Version.Model, Version = call.Version.Version };
        var rows = new MessageRows(request, pipeline.Limits);
        var writer = new MessageWriter(response);
        pipeline.Score(call, ref rows, ref writer);
        return response;
    }

    internal DenseScoreResponse ScoreDenseMessage(DenseScoreRequest request, IReadOnlyList<string>? streamFeatures)
    {
        var version = pipeline.Catalog.LiveOrNamed(request.Model, request.Version);
        var model = version.Compiled;
        var names = request.Features.Count > 0 ? (IReadOnlyList<string>)request.Features : streamFeatures
            ?? throw Application.Errors.Invalid("features", "name the feature of each column (on a stream, in the first message at least)");
        var columnOf = ScoringPipeline.DenseColumns(version, names);
        var rows = pipeline.DenseRows(request.Values.Count, names.Count, request.Keys);
        var settings = ScoringPipeline.Settings(request.HasLevel ? request.Level : null);
        var f = model.FeatureCount;
        var matrix = ArrayPool<double>.Shared.Rent(rows * f);
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

            var response = new DenseScoreResponse { Model = version.Model, Version = version.Version };
            var writer = new DenseMessageWriter(response);
            pipeline.ScoreDense(version, dense, rows, request.Keys, settings, ref writer);
            return response;
        }
        finally
        {
            ArrayPool<double>.Shared.Return(matrix);
        }
    }

    /// <summary>The rows of a <see cref="ScoreRequest"/>: protobuf Struct values bound onto named values.</summary>
    private readonly struct MessageRows(ScoreRequest request, Application.ScoringLimits limits) : IScoreRows
    {
        public int Count => request.Rows.Count;

        public string? Key(int row) => request.Keys.Count > 0 ? request.Keys[row] : null;

        public bool TryBind(int row, CompiledModel model, Span<NamedValue> values, out int count, out string? field, out string? reason)
        {
            count = 0;
            field = null;
            reason = null;
            var fields = request.Rows[row];
            if (fields is null)
            {
                field = $"rows[{row}]";
                reason = "the row is not a JSON object";
                return false;
            }

            if (fields.Fields.Count > values.Length)
            {
                field = $"rows[{row}]";
                reason = $"{fields.Fields.Count} fields; at most {limits.MaxFeaturesPerRow}";
                return false;
            }

            foreach (var (name, value) in fields.Fields)
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
                            field = name;
                            reason = $"longer than {limits.MaxStringLength} characters";
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
                        field = name;
                        reason = "expects a number or a string, got " + (value.KindCase == Value.KindOneofCase.ListValue ? "a list" : "an object");
                        return false;
                }

                values[count++] = new NamedValue(name, v);
            }

            return true;
        }
    }

    /// <summary>Writes each row's result into a <see cref="ScoreResponse"/>.</summary>
    private readonly struct MessageWriter(ScoreResponse response) : IScoreWriter
    {
        public void Scored(int row, Guid id, string? key, in ScoredRow r, CompiledModel model, ReadOnlySpan<int> order, ReadOnlySpan<double> contributions,
            ReadOnlySpan<Engine.Scoring.RowWarning> warnings)
        {
            var result = new RowResult { Id = id.ToString(), Key = key ?? "", Error = Value.ForNull(), Eta = r.Eta, Probability = r.Probability };
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

            foreach (var j in order)
            {
                result.Contributions.Add(new Contribution { Term = model.TermNames[j], Value = contributions[j] });
            }

            foreach (var w in warnings)
            {
                result.Warnings.Add(new V1.RowWarning
                {
                    Code = RowMessages.Code(w.Kind),
                    Field = w.Feature >= 0 ? model.FeatureNames[w.Feature] : "",
                    Message = RowMessages.Describe(model, w),
                });
            }

            response.Results.Add(result);
        }

        public void Failed(int row, Guid id, string? key, string code, string field, string reason) =>
            response.Results.Add(new RowResult { Id = id.ToString(), Key = key ?? "", Error = RowErrorValue(code, field, reason) });
    }

    /// <summary>Writes the columns of a <see cref="DenseScoreResponse"/>.</summary>
    private readonly struct DenseMessageWriter(DenseScoreResponse response) : IDenseScoreWriter
    {
        public void Row(int row, Guid id, in ScoredRow s)
        {
            response.Ids.Add(id.ToString());
            response.Eta.Add(s.Eta);
            response.Se.Add(s.Se);
            response.Probability.Add(s.Probability);
            response.Lower.Add(s.Lower);
            response.Upper.Add(s.Upper);
            response.Flag.Add(s.Flag);
            response.WarningCount.Add(s.WarningCount);
        }

        public void Failed(int row, string code, string field, string reason) =>
            response.Errors.Add(new DenseRowError { Row = row, Code = code, Field = field, Reason = reason });
    }

    /// <summary>A row's error as the JSON object {"code", "field", "reason"}.</summary>
    internal static Value RowErrorValue(string code, string field, string reason) => Value.ForStruct(new Struct
    {
        Fields = { ["code"] = Value.ForString(code), ["field"] = Value.ForString(field), ["reason"] = Value.ForString(reason) },
    });
}
