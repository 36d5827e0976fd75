using System.Text.Json;
using Json.Schema;

namespace Scorer.ModelFile.Validation;

/// <summary>Validates a model file against the published JSON Schema (docs/model-file.schema.json, embedded).</summary>
internal static class SchemaValidator
{
    private static readonly Lazy<JsonSchema> Schema = new(LoadSchema, LazyThreadSafetyMode.ExecutionAndPublication);

    /// <summary>The schema text, as published.</summary>
    public static string SchemaText { get; } = ReadSchemaText();

    public static void Validate(JsonElement root, List<ModelFileProblem> problems)
    {
        var results = Schema.Value.Evaluate(root, new EvaluationOptions { OutputFormat = OutputFormat.List });
        if (results.IsValid)
        {
            return;
        }

        var seen = new HashSet<(string, string)>();
        foreach (var detail in results.Details ?? [])
        {
            if (detail.IsValid || detail.Errors is null)
            {
                continue;
            }

            var path = JsonPath.FromPointer(detail.InstanceLocation.ToString());
            foreach (var (keyword, message) in detail.Errors)
            {
                // oneOf/anyOf report a summary beside the branch errors; the branch errors say more.
                if (keyword is "oneOf" or "anyOf" && detail.Errors.Count == 1 && HasDeeperError(results, detail))
                {
                    continue;
                }

                if (seen.Add((path, message)))
                {
                    problems.Add(new ModelFileProblem(path, Describe(keyword, message)));
                }
            }
        }
    }

    private static bool HasDeeperError(EvaluationResults all, EvaluationResults summary)
    {
        var prefix = summary.EvaluationPath.ToString();
        return (all.Details ?? []).Any(d => !d.IsValid && d.Errors is { Count: > 0 } && !ReferenceEquals(d, summary)
            && d.EvaluationPath.ToString().StartsWith(prefix + "/", StringComparison.Ordinal));
    }

    private static string Describe(string keyword, string message) => keyword switch
    {
        "additionalProperties" or "false" => "unknown or misplaced field: " + message,
        _ => message,
    };

    private static JsonSchema LoadSchema() => JsonSchema.FromText(SchemaText);

    private static string ReadSchemaText()
    {
        using var stream = typeof(SchemaValidator).Assembly.GetManifestResourceStream("model-file.schema.json")
            ?? throw new InvalidOperationException("The embedded model-file.schema.json is missing from the build.");
        using var reader = new StreamReader(stream);
        return reader.ReadToEnd();
    }
}
