using Microsoft.AspNetCore.Authorization;
using System.Globalization;
using Google.Protobuf.WellKnownTypes;
using Grpc.Core;
using Scorer.ModelFile;
using Scorer.Application.Models;
using Scorer.Registry;
using Scorer.Store;
using Scorer.Transport.V1;

namespace Scorer.Transport.Services;

/// <summary>What is loaded, the files as loaded, stage changes (admin) and their history.</summary>
[Authorize(Policy = Roles.Score)]
public sealed class ModelsService(ModelCatalog catalog, StageChanges stages) : Models.ModelsBase
{
    public override Task<ListModelsResponse> ListModels(ListModelsRequest request, ServerCallContext context)
    {
        var snapshot = catalog.Current;
        var response = new ListModelsResponse();
        foreach (var entry in snapshot.Models.Values)
        {
            var info = new ModelInfo { Model = entry.Name, Live = entry.Live?.Version ?? "" };
            foreach (var v in entry.Versions)
            {
                var version = new V1.VersionInfo
                {
                    Version = v.Version,
                    Stage = ModelCatalog.StageName(v.Stage),
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

        response.LoadErrors.AddRange(snapshot.Failures.Select(LoadErrorOf));

        return Task.FromResult(response);
    }

    public override Task<Struct> GetModelVersion(GetModelVersionRequest request, ServerCallContext context)
    {
        var version = catalog.Version(request.Model, request.Version);
        return Task.FromResult(Struct.Parser.ParseJson(System.Text.Encoding.UTF8.GetString(version.FileBytes.Span)));
    }

    [Authorize(Policy = Roles.Admin)]
    public override async Task<StageResponse> SetStage(SetStageRequest request, ServerCallContext context)
    {
        var changes = await stages.SetAsync(request.Model, request.Version, request.Stage, ApiKeyAuthentication.Actor(context), context.CancellationToken).ConfigureAwait(false);
        return Response(request.Model, changes);
    }

    [Authorize(Policy = Roles.Admin)]
    public override async Task<StageResponse> Rollback(RollbackRequest request, ServerCallContext context)
    {
        var changes = await stages.RollbackAsync(request.Model, ApiKeyAuthentication.Actor(context), context.CancellationToken).ConfigureAwait(false);
        return Response(request.Model, changes);
    }

    public override async Task<GetHistoryResponse> GetHistory(GetHistoryRequest request, ServerCallContext context)
    {
        var response = new GetHistoryResponse { Model = request.Model };
        response.Changes.AddRange((await stages.HistoryAsync(request.Model, context.CancellationToken).ConfigureAwait(false)).Select(Info));
        return response;
    }

    /// <summary>A file the registry could not load, as the API gives it (also in the page's overview).</summary>
    public static LoadError LoadErrorOf(LoadFailure failure)
    {
        var error = new LoadError { File = Path.GetFileName(failure.File), At = Time(failure.At), Kind = LoadFailure.KindName(failure.Kind) };
        error.Problems.AddRange(failure.Problems.Select(p => new Problem { Path = p.Path, Reason = p.Reason, Hint = p.Hint ?? "" }));
        return error;
    }

    private StageResponse Response(string model, IReadOnlyList<StageChange> changes)
    {
        var response = new StageResponse { Model = model, Live = stages.Live(model) ?? "" };
        response.Changes.AddRange(changes.Select(Info));
        return response;
    }

    private static StageChangeInfo Info(StageChange c) => new()
    {
        Version = c.Version,
        From = c.From is { } f ? ModelCatalog.StageName(f) : "",
        To = ModelCatalog.StageName(c.To),
        Actor = c.Actor,
        At = Time(c.At),
    };

    internal static string Time(DateTimeOffset t) => t.UtcDateTime.ToString("yyyy-MM-dd'T'HH:mm:ss.fff'Z'", CultureInfo.InvariantCulture);
}
