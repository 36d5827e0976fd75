using System.Text.Json;
using System.Text.Json.Nodes;
using Scorer.ModelFile;

namespace Scorer.Fitting;

/// <summary>
/// Reads the design of a refit from a model file (<c>--like</c>) or from a spec: a model file whose terms may lack
/// coefficients and which may lack the model's name, version, link and outcome. The file is checked by every rule of
/// the model file format, with the missing parts filled in first.
/// </summary>
public static class DesignTemplateReader
{
    public static (DesignTemplate Template, ModelDocument Document) Read(string path)
    {
        JsonNode? node;
        try
        {
            node = JsonNode.Parse(File.ReadAllText(path));
        }
        catch (JsonException ex)
        {
            throw new FitException(path, "is not valid JSON: " + ex.Message);
        }

        if (node is not JsonObject root)
        {
            throw new FitException(path, "must hold a JSON object (a model file or a design spec)");
        }

        root.TryAdd("format", ModelDocument.FormatV1);
        root.TryAdd("model", "spec");
        root.TryAdd("version", "spec");
        root.TryAdd("link", "logit");
        root.TryAdd("outcome", new JsonObject { ["name"] = "outcome", ["positive"] = "1", ["horizon"] = "P1D", ["negatives"] = "explicit" });
        if (root["terms"] is JsonArray terms)
        {
            foreach (var t in terms.OfType<JsonObject>())
            {
                t.TryAdd("coefficient", 0.0);
            }
        }

        // The refit computes these anew; an old covariance would not match a changed design.
        root.Remove("covariance");
        root.Remove("baseline");
        root.Remove("fit");
        var result = ModelFileReader.Read(System.Text.Encoding.UTF8.GetBytes(root.ToJsonString()));
        if (result.Document is not { } doc)
        {
            throw new FitException([.. result.Errors.Select(e => new FitProblem($"{path} {e.Path}", e.Reason))]);
        }

        return (new DesignTemplate(doc.Features, doc.Terms), doc);
    }
}
