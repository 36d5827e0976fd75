using System.Globalization;
using System.Text;
using System.Text.Json;
using Grpc.Core;
using Microsoft.AspNetCore.Http;
using Scorer.Registry;
using Scorer.Store;
using Scorer.Tabular;

namespace Scorer.Transport.Rest;

/// <summary>
/// <c>GET /v1/models/{model}/labelled?since=&amp;until=&amp;version=</c> (admin): the logged rows that have an outcome,
/// as CSV, streamed in prediction-time order. Columns: <c>prediction_id, version, stage, scored_at, key, eta,
/// probability, outcome, implicit</c>, then every feature of the model's versions in model-file order, so the file is
/// ready for <c>scorer fit --like MODEL --data FILE --outcome outcome</c>. <c>since</c>/<c>until</c> are ISO 8601
/// times bounding the prediction time (default: everything).
/// </summary>
public sealed class LabelledExport(ModelRegistry registry, IScorerStore store, ApiKeyInterceptor keys)
{
    public const string Method = "/scorer.v1.Outcomes/ExportLabelled";

    public async Task HandleAsync(HttpContext context, string model)
    {
        ModelEntry entry;
        DateTimeOffset since, until;
        string? version;
        try
        {
            keys.Authorize(context.Request.Headers.Authorization.Count > 0 ? context.Request.Headers.Authorization.ToString() : null, Method);
            entry = registry.Current.Find(model) ?? throw Errors.NotFound("model", $"no model '{model}' is loaded");
            since = Time(context.Request.Query["since"].ToString(), "since", DateTimeOffset.UnixEpoch);
            until = Time(context.Request.Query["until"].ToString(), "until", DateTimeOffset.MaxValue.AddYears(-1));
            version = context.Request.Query["version"].ToString() is { Length: > 0 } v ? v : null;
            if (version is not null && entry.Find(version) is null)
            {
                throw Errors.NotFound("version", $"model '{model}' has no version '{version}' (loaded: {string.Join(", ", entry.Versions.Select(x => x.Version))})");
            }

            if (until <= since)
            {
                throw Errors.Invalid("until", "must be later than since");
            }
        }
        catch (RpcException ex)
        {
            await RestScoring.WriteErrorAsync(context.Response, ex).ConfigureAwait(false);
            return;
        }

        var features = entry.Versions.SelectMany(v => v.Document.Features.Select(f => f.Name)).Distinct(StringComparer.Ordinal).ToList();
        var column = features.Select((name, i) => (name, i)).ToDictionary(p => p.name, p => p.i, StringComparer.Ordinal);
        context.Response.ContentType = "text/csv; charset=utf-8";
        context.Response.Headers.ContentDisposition = $"attachment; filename=\"{model}-labelled.csv\"";
        await using var text = new StreamWriter(context.Response.Body, new UTF8Encoding(false), 64 * 1024);
        var csv = new CsvWriter(text);
        foreach (var name in new[] { "prediction_id", "version", "stage", "scored_at", "key", "eta", "probability", "outcome", "implicit" }.Concat(features))
        {
            csv.Field(name);
        }

        csv.EndRecord();
        var values = new string?[features.Count];
        var rows = 0;
        await foreach (var row in store.ReadLabelledRowsAsync(model, version, since, until, context.RequestAborted).ConfigureAwait(false))
        {
            var p = row.Prediction;
            csv.Field(p.Id.ToString());
            csv.Field(p.Version);
            csv.Field(Services.ModelsService.StageName(p.Stage));
            csv.Field(p.ScoredAt.ToString("yyyy-MM-ddTHH:mm:ss.ffffffZ", CultureInfo.InvariantCulture));
            csv.Field(row.Key);
            csv.Number(p.Eta);
            csv.Number(p.Probability);
            csv.Number(p.Outcome);
            csv.Number(p.Implicit ? 1 : 0);
            Array.Clear(values);
            Spread(row.FeaturesJson, column, values);
            foreach (var v in values)
            {
                csv.Field(v);
            }

            csv.EndRecord();
            if (++rows % 10_000 == 0)
            {
                await text.FlushAsync(context.RequestAborted).ConfigureAwait(false);
            }
        }
    }

    /// <summary>The row's values by column, as text (numbers in round-trip form, levels as they were sent).</summary>
    private static void Spread(string featuresJson, Dictionary<string, int> column, string?[] values)
    {
        using var doc = JsonDocument.Parse(featuresJson);
        foreach (var property in doc.RootElement.EnumerateObject())
        {
            if (!column.TryGetValue(property.Name, out var i))
            {
                continue;
            }

            values[i] = property.Value.ValueKind switch
            {
                JsonValueKind.Number => property.Value.GetDouble().ToString("R", CultureInfo.InvariantCulture),
                JsonValueKind.String => property.Value.GetString(),
                JsonValueKind.True => "1",
                JsonValueKind.False => "0",
                _ => null,
            };
        }
    }

    private static DateTimeOffset Time(string text, string field, DateTimeOffset absent)
    {
        if (text.Length == 0)
        {
            return absent;
        }

        return DateTimeOffset.TryParse(text, CultureInfo.InvariantCulture, DateTimeStyles.AssumeUniversal, out var t)
            ? t.ToUniversalTime()
            : throw Errors.Invalid(field, $"'{text}' is not a time; give ISO 8601, e.g. 2026-11-01T00:00:00Z");
    }
}
