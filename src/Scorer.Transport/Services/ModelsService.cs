using System.Globalization;
using Google.Protobuf.WellKnownTypes;
using Grpc.Core;
using Scorer.ModelFile;
using Scorer.Registry;
using Scorer.Store;
using Scorer.Transport.V1;

namespace Scorer.Transport.Services;

/// <summary>What is loaded, the files as loaded, stage changes (admin) and their history.</summary>
public sealed class ModelsService(ModelRegistry registry, IScorerStore store) : Models.ModelsBase
{
    public override Task<ListModelsResponse> ListModels(ListModelsRequest request, ServerCallContext context)
    {
        var snapshot = registry.Current;
        var response = new ListModelsResponse();
        foreach (var entry in snapshot.Models.Values)
        {
            var info = new ModelInfo { Model = entry.Name, Live = entry.Live?.Version ?? "" };
            foreach (var v in entry.Versions)
            {
                var version = new V1.VersionInfo
                {
                    Version = v.Version,
                    Stage = StageName(v.Stage),
                    Link = ModelFileWriter.LinkName(v.Document.Link),
                    File = Path.GetFileName(v.File),
                    Sha256 = v.Sha256,
                    LoadedAt = Time(v.LoadedAt),
                    Terms = v.Compiled.TermCount,
                };
                version.Features.AddRange(v.Compiled.FeatureNames);
                info.Versions.Add(version);
            }

            response.Models.Add(info);
        }

        foreach (var failure in snapshot.Failures)
        {
            var error = new LoadError { File = Path.GetFileName(failure.File), At = Time(failure.At), Kind = LoadFailure.KindName(failure.Kind) };
            error.Problems.AddRange(failure.Problems.Select(p => new Problem { Path = p.Path, Reason = p.Reason, Hint = p.Hint ?? "" }));
            response.LoadErrors.Add(error);
        }

        return Task.FromResult(response);
    }

    public override Task<Struct> GetModelVersion(GetModelVersionRequest request, ServerCallContext context)
    {
        var version = Find(request.Model, request.Version);
        return Task.FromResult(Struct.Parser.ParseJson(System.Text.Encoding.UTF8.GetString(version.FileBytes.Span)));
    }

    public override async Task<StageResponse> SetStage(SetStageRequest request, ServerCallContext context)
    {
        var stage = ParseStage(request.Stage);
        Find(request.Model, request.Version);
        var changes = await Guard(() => registry.SetStageAsync(request.Model, request.Version, stage, ApiKeyInterceptor.Actor(context), context.CancellationToken)).ConfigureAwait(false);
        return Response(request.Model, changes);
    }

    public override async Task<StageResponse> Rollback(RollbackRequest request, ServerCallContext context)
    {
        var changes = await Guard(() => registry.RollbackAsync(request.Model, ApiKeyInterceptor.Actor(context), context.CancellationToken)).ConfigureAwait(false);
        return Response(request.Model, changes);
    }

    public override async Task<GetHistoryResponse> GetHistory(GetHistoryRequest request, ServerCallContext context)
    {
        if (registry.Current.Find(request.Model) is null)
        {
            throw Errors.NotFound("model", $"no model '{request.Model}' is loaded");
        }

        var response = new GetHistoryResponse { Model = request.Model };
        response.Changes.AddRange((await store.GetHistoryAsync(request.Model, context.CancellationToken).ConfigureAwait(false)).Select(Info));
        return response;
    }

    public static string StageName(Stage stage) => stage switch
    {
        Stage.Live => "live",
        Stage.Shadow => "shadow",
        _ => "retired",
    };

    private static Stage ParseStage(string text) => text switch
    {
        "live" => Stage.Live,
        "shadow" => Stage.Shadow,
        "retired" => Stage.Retired,
        _ => throw Errors.Invalid("stage", $"'{text}' is not a stage; give live, shadow or retired"),
    };

    private LoadedVersion Find(string model, string version)
    {
        var entry = registry.Current.Find(model) ?? throw Errors.NotFound("model", $"no model '{model}' is loaded");
        return entry.Find(version) ?? throw Errors.NotFound("version",
            $"model '{model}' has no version '{version}' (loaded: {string.Join(", ", entry.Versions.Select(v => v.Version))})");
    }

    private static async Task<T> Guard<T>(Func<Task<T>> action)
    {
        try
        {
            return await action().ConfigureAwait(false);
        }
        catch (RegistryException ex)
        {
            throw ex.NotFound ? Errors.NotFound(ex.Field, ex.Reason) : Errors.Precondition(ex.Field, ex.Reason);
        }
    }

    private StageResponse Response(string model, IReadOnlyList<StageChange> changes)
    {
        var response = new StageResponse { Model = model, Live = registry.Current.Find(model)?.Live?.Version ?? "" };
        response.Changes.AddRange(changes.Select(Info));
        return response;
    }

    private static StageChangeInfo Info(StageChange c) => new()
    {
        Version = c.Version,
        From = c.From is { } f ? StageName(f) : "",
        To = StageName(c.To),
        Actor = c.Actor,
        At = Time(c.At),
    };

    internal static string Time(DateTimeOffset t) => t.UtcDateTime.ToString("yyyy-MM-dd'T'HH:mm:ss.fff'Z'", CultureInfo.InvariantCulture);
}
