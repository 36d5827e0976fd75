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
        // A valid file, the usual case, is checked with the flag output: the hierarchical one keeps a result node for every
        // value of the file (a 2,000-term covariance: 4 million nodes, gigabytes, tens of seconds). Only a file with an
        // error is evaluated again to say where; the reader's bounds (MaxTerms) keep that second pass proportionate.
        if (Schema.Value.Evaluate(root, new EvaluationOptions { OutputFormat = OutputFormat.Flag }).IsValid)
        {
            return;
        }

        var results = Schema.Value.Evaluate(root, new EvaluationOptions { OutputFormat = OutputFormat.Hierarchical });
        if (results.IsValid)
        {
            return;
        }

        Collect(results, problems, new HashSet<(string, string)>());
    }

    /// <summary>
    /// Reports the errors of the failing part of the result tree. Below a passing node nothing is an error (the branch
    /// of a <c>oneOf</c> that did not match, when another did), and a failing <c>if</c> only means its <c>then</c> does
    /// not apply.
    /// </summary>
    private static void Collect(EvaluationResults node, List<ModelFileProblem> problems, HashSet<(string, string)> seen)
    {
        if (node.IsValid || IsCondition(node))
        {
            return;
        }

        var children = node.Details ?? [];
        if (node.Errors is { Count: > 0 } errors)
        {
            var path = JsonPath.FromPointer(node.InstanceLocation.ToString());
            foreach (var (keyword, message) in errors)
            {
                // oneOf/anyOf report a summary beside the branch errors; the branch errors say more.
                if (keyword is "oneOf" or "anyOf" && children.Any(HasError))
                {
                    continue;
                }

                if (seen.Add((path, message)))
                {
                    problems.Add(new ModelFileProblem(path, Describe(keyword, message)));
                }
            }
        }

        foreach (var child in children)
        {
            Collect(child, problems, seen);
        }
    }

    private static bool IsCondition(EvaluationResults node)
    {
        var path = node.EvaluationPath.ToString();
        return path.EndsWith("/if", StringComparison.Ordinal) && !path.EndsWith("/properties/if", StringComparison.Ordinal);
    }

    private static bool HasError(EvaluationResults node) =>
        !node.IsValid && !IsCondition(node) && (node.Errors is { Count: > 0 } || (node.Details ?? []).Any(HasError));

    private static string Describe(string keyword, string message) => keyword switch
    {
        // A property that meets a `false` schema (additionalProperties: false, or a field forbidden for this type).
        "" or "false" => "unknown or misplaced field",
        "additionalProperties" => "unknown or misplaced field: " + message,
        _ => message,
    };

    // A registry of its own: the global one refuses a second schema with the same $id, so another component that builds
    // this schema as well would otherwise break the loader (or be broken by it).
    private static JsonSchema LoadSchema() => JsonSchema.FromText(SchemaText, new BuildOptions { SchemaRegistry = new SchemaRegistry() });

    private static string ReadSchemaText()
    {
        using var stream = typeof(SchemaValidator).Assembly.GetManifestResourceStream("model-file.schema.json")
            ?? throw new InvalidOperationException("The embedded model-file.schema.json is missing from the build.");
        using var reader = new StreamReader(stream);
        return reader.ReadToEnd();
    }
}
