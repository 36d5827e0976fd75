using System.Text.Json;
using Scorer.Engine;
using Scorer.ModelFile;

namespace Scorer.Cli.Commands;

/// <summary><c>scorer check MODEL.json</c>: exit 0 when valid, 1 when not; every problem printed.</summary>
internal static class CheckCommand
{
    public static int Run(string path, bool json, TextWriter stdout, TextWriter stderr)
    {
        ModelFileLoadResult result;
        try
        {
            result = ModelFileReader.ReadFile(path);
        }
        catch (IOException ex)
        {
            stderr.WriteLine($"scorer check: cannot read {path}: {ex.Message}");
            return 1;
        }
        catch (UnauthorizedAccessException ex)
        {
            stderr.WriteLine($"scorer check: cannot read {path}: {ex.Message}");
            return 1;
        }

        if (json)
        {
            WriteJson(path, result, stdout);
        }
        else
        {
            foreach (var problem in result.Problems)
            {
                stdout.WriteLine($"{path}: {problem}");
            }

            if (result.Document is { } doc)
            {
                var model = CompiledModel.Compile(doc);
                stdout.WriteLine($"{path}: valid: {doc.Model} {doc.Version}, {ModelFileWriter.LinkName(doc.Link)} link, " +
                    $"{model.FeatureCount} features, {model.TermCount} terms, " +
                    (model.HasCovariance ? model.FactorIsTriangular ? "covariance positive definite" : "covariance singular" : "no covariance") +
                    $", {result.Warnings.Count()} warnings");
            }
            else
            {
                stdout.WriteLine($"{path}: invalid: {result.Errors.Count()} errors, {result.Warnings.Count()} warnings");
            }
        }

        return result.IsValid ? 0 : 1;
    }

    private static void WriteJson(string path, ModelFileLoadResult result, TextWriter stdout)
    {
        using var ms = new MemoryStream();
        using (var w = new Utf8JsonWriter(ms, new JsonWriterOptions { Indented = true }))
        {
            w.WriteStartObject();
            w.WriteString("file", path);
            w.WriteBoolean("valid", result.IsValid);
            if (result.Document is { } doc)
            {
                w.WriteString("model", doc.Model);
                w.WriteString("version", doc.Version);
            }

            w.WriteStartArray("problems");
            foreach (var p in result.Problems)
            {
                w.WriteStartObject();
                w.WriteString("severity", p.Severity == ProblemSeverity.Error ? "error" : "warning");
                w.WriteString("path", p.Path);
                w.WriteString("reason", p.Reason);
                if (p.Hint is not null)
                {
                    w.WriteString("hint", p.Hint);
                }

                w.WriteEndObject();
            }

            w.WriteEndArray();
            w.WriteEndObject();
        }

        stdout.WriteLine(System.Text.Encoding.UTF8.GetString(ms.ToArray()));
    }
}
