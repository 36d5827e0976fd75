using System.Text;
using System.Text.Json.Nodes;

namespace Scorer.ModelFile.Tests;

/// <summary>
/// Small model files for the tests, all invented: a model of pump bearings at a water utility failing within 30 days.
/// <see cref="Minimal"/> is valid with no problem at all; a test changes one thing in it and checks what the loader says.
/// </summary>
internal static class ModelFiles
{
    /// <summary>
    /// Valid, no warnings. Terms: [0] intercept, [1] log(vibration_rms), [2] site = east, [3] site = river;
    /// features: [0] vibration_rms (numeric), [1] site (categorical, reference north).
    /// </summary>
    public const string Minimal = """
        {
          "format": "scorer.model/1",
          "model": "pump_bearing_30d",
          "version": "1.0.0",
          "link": "logit",
          "outcome": { "name": "bearing_failure", "positive": "bearing failed", "horizon": "P30D", "negatives": "explicit" },
          "features": [
            { "name": "vibration_rms", "type": "numeric", "min": 0.4, "max": 11.5 },
            { "name": "site", "type": "categorical", "levels": ["north", "east", "river"], "reference": "north" }
          ],
          "terms": [
            { "name": "(Intercept)", "coefficient": -3.1, "factors": [] },
            { "name": "log(vibration_rms)", "coefficient": 0.9, "factors": [{ "feature": "vibration_rms", "transform": "log" }] },
            { "name": "site_east", "coefficient": 0.25, "factors": [{ "feature": "site", "level": "east" }] },
            { "name": "site_river", "coefficient": 0.6, "factors": [{ "feature": "site", "level": "river" }] }
          ],
          "covariance": [
            [0.25, -0.01, -0.02, -0.03],
            [-0.01, 0.04, 0.0, 0.005],
            [-0.02, 0.0, 0.09, 0.02],
            [-0.03, 0.005, 0.02, 0.16]
          ],
          "baseline": { "n": 1000, "events": 70 }
        }
        """;

    /// <summary>Valid, no warnings, every optional section and field present.</summary>
    public const string Full = """
        {
          "format": "scorer.model/1",
          "model": "pump_bearing_30d",
          "version": "2.1.0+retrain.3",
          "description": "Invented example: bearing failure within 30 days of a vibration reading.",
          "link": "logit",
          "outcome": { "name": "bearing_failure", "positive": "bearing replaced after a failure", "horizon": "P30D", "negatives": "implicit" },
          "features": [
            { "name": "vibration_rms", "type": "numeric", "description": "RMS vibration velocity, mm/s", "min": 0.4, "max": 11.5, "missing": "reject" },
            { "name": "bearing_temp_c", "type": "numeric", "description": "bearing housing temperature, degrees C", "min": 18, "max": 95, "missing": "mean", "mean": 46.5 },
            { "name": "hours_since_service", "type": "numeric", "min": 0, "max": 4380, "missing": "reject" },
            { "name": "site", "type": "categorical", "levels": ["north", "east", "river"], "reference": "north", "missing": "reject", "unknown": "reference" }
          ],
          "terms": [
            { "name": "(Intercept)", "coefficient": -4.1, "factors": [] },
            { "name": "log(vibration_rms)", "coefficient": 0.92, "factors": [{ "feature": "vibration_rms", "transform": "log" }] },
            { "name": "temp_std", "coefficient": 0.31, "factors": [{ "feature": "bearing_temp_c", "center": 45, "scale": 10 }] },
            { "name": "sqrt(hours_since_service)", "coefficient": 0.027, "factors": [{ "feature": "hours_since_service", "transform": "sqrt" }] },
            { "name": "site_east", "coefficient": 0.18, "factors": [{ "feature": "site", "level": "east" }] },
            { "name": "site_river", "coefficient": 0.55, "factors": [{ "feature": "site", "level": "river" }] },
            { "name": "log(vibration_rms):site_river", "coefficient": 0.21, "factors": [{ "feature": "vibration_rms", "transform": "log" }, { "feature": "site", "level": "river" }] }
          ],
          "covariance": [
            [0.30, -0.004, 0.001, 0.001, 0.001, 0.001, 0.001],
            [-0.004, 0.05, 0.001, 0.001, 0.001, 0.001, 0.001],
            [0.001, 0.001, 0.02, 0.001, 0.001, 0.001, 0.001],
            [0.001, 0.001, 0.001, 0.01, 0.001, 0.001, 0.001],
            [0.001, 0.001, 0.001, 0.001, 0.09, 0.001, 0.001],
            [0.001, 0.001, 0.001, 0.001, 0.001, 0.12, -0.002],
            [0.001, 0.001, 0.001, 0.001, 0.001, -0.002, 0.06]
          ],
          "threshold": 0.15,
          "sampling": { "training_event_rate": 0.07, "population_event_rate": 0.02 },
          "baseline": {
            "n": 5200,
            "events": 364,
            "linear_predictor": { "edges": [-4, -3, -2], "proportions": [0.2, 0.4, 0.3, 0.1] },
            "max_se": 0.41,
            "features": {
              "vibration_rms": { "edges": [1.5, 3.0], "proportions": [0.3, 0.5, 0.2] },
              "site": { "levels": { "north": 0.5, "east": 0.3, "river": 0.2 } }
            }
          },
          "fit": { "method": "IRLS", "iterations": 6, "converged": true, "deviance": 2411.7 },
          "x-owner": "asset-analytics",
          "x-review": { "approved": true, "by": ["a", "b"] }
        }
        """;

    /// <summary>
    /// Valid: an intercept and one indicator term per further level of the categorical feature <c>g</c> (levels
    /// L0 … L<paramref name="terms"/>-1, reference L0), <paramref name="terms"/> terms in all, with a diagonal covariance
    /// of as many rows (or <paramref name="covarianceRows"/> rows when given).
    /// </summary>
    public static string Wide(int terms, int? covarianceRows = null)
    {
        var rows = covarianceRows ?? terms;
        var text = new StringBuilder();
        text.Append("""{"format":"scorer.model/1","model":"wide","version":"1","link":"logit",""");
        text.Append("""
            "outcome":{"name":"y","positive":"yes","horizon":"P30D","negatives":"explicit"},
            """);
        text.Append("\"features\":[{\"name\":\"g\",\"type\":\"categorical\",\"reference\":\"L0\",\"levels\":[");
        text.AppendJoin(',', Enumerable.Range(0, Math.Max(terms, 1)).Select(i => $"\"L{i}\""));
        text.Append("]}],\"terms\":[{\"name\":\"(Intercept)\",\"coefficient\":-2,\"factors\":[]}");
        for (var i = 1; i < terms; i++)
        {
            text.Append($",{{\"name\":\"g=L{i}\",\"coefficient\":0.01,\"factors\":[{{\"feature\":\"g\",\"level\":\"L{i}\"}}]}}");
        }

        text.Append("],\"covariance\":[");
        for (var i = 0; i < rows; i++)
        {
            text.Append(i == 0 ? "[" : ",[");
            text.AppendJoin(',', Enumerable.Range(0, rows).Select(j => j == i ? "0.01" : "0"));
            text.Append(']');
        }

        text.Append("],\"baseline\":{\"n\":1000,\"events\":70}}");
        return text.ToString();
    }

    public static JsonObject Parse(string text) => JsonNode.Parse(text)!.AsObject();

    public static JsonNode Json(string fragment) => JsonNode.Parse(fragment)!;

    /// <summary><paramref name="baseText"/> (default <see cref="Minimal"/>) with one change made to its JSON tree.</summary>
    public static string Changed(Action<JsonObject> change, string baseText = Minimal)
    {
        var root = Parse(baseText);
        change(root);
        return root.ToJsonString();
    }

    /// <summary>The text with one occurrence of <paramref name="oldText"/> replaced; for what a JSON tree cannot hold.</summary>
    public static string Replaced(string text, string oldText, string newText)
    {
        var at = text.IndexOf(oldText, StringComparison.Ordinal);
        if (at < 0 || text.IndexOf(oldText, at + 1, StringComparison.Ordinal) >= 0)
        {
            throw new ArgumentException($"'{oldText}' must occur exactly once in the text", nameof(oldText));
        }

        return text[..at] + newText + text[(at + oldText.Length)..];
    }

    public static ModelFileLoadResult Read(string text, ModelFileReaderOptions? options = null) =>
        ModelFileReader.Read(Encoding.UTF8.GetBytes(text), options);

    public static ModelFileLoadResult ReadChanged(Action<JsonObject> change, string baseText = Minimal) => Read(Changed(change, baseText));
}

/// <summary>Assertions on the problems of a load, each failing with the full list of problems.</summary>
internal static class Problems
{
    public static string List(ModelFileLoadResult result) =>
        result.Problems.Count == 0 ? "(no problems)" : string.Join(Environment.NewLine, result.Problems);

    public static void None(ModelFileLoadResult result)
    {
        Assert.True(result.Problems.Count == 0, "expected no problems, got:" + Environment.NewLine + List(result));
        Assert.NotNull(result.Document);
    }

    /// <summary>The file is rejected with exactly one error, at <paramref name="path"/>.</summary>
    public static ModelFileProblem SingleErrorAt(ModelFileLoadResult result, string path)
    {
        var errors = result.Errors.ToList();
        Assert.True(errors.Count == 1, $"expected one error at {path}, got:" + Environment.NewLine + List(result));
        Assert.Equal(path, errors[0].Path);
        Assert.Null(result.Document);
        Assert.False(result.IsValid);
        return errors[0];
    }

    /// <summary>The file is rejected with one or more errors, all at <paramref name="path"/>.</summary>
    public static IReadOnlyList<ModelFileProblem> ErrorsOnlyAt(ModelFileLoadResult result, string path)
    {
        var errors = result.Errors.ToList();
        Assert.True(errors.Count > 0 && errors.All(e => e.Path == path),
            $"expected errors at {path} only, got:" + Environment.NewLine + List(result));
        Assert.Null(result.Document);
        return errors;
    }

    /// <summary>The file is valid, and among its warnings is one at <paramref name="path"/> whose reason contains <paramref name="text"/>.</summary>
    public static ModelFileProblem WarningAt(ModelFileLoadResult result, string path, string text)
    {
        Assert.True(result.IsValid, "expected a valid file, got:" + Environment.NewLine + List(result));
        var warning = result.Warnings.FirstOrDefault(w => w.Path == path && w.Reason.Contains(text, StringComparison.Ordinal));
        Assert.True(warning is not null, $"expected a warning at {path} containing '{text}', got:" + Environment.NewLine + List(result));
        return warning!;
    }

    public static void Contains(string expected, ModelFileProblem problem) =>
        Assert.True(problem.Reason.Contains(expected, StringComparison.Ordinal), $"expected '{expected}' in: {problem}");
}
