using System.Text.Json;

namespace Scorer.ModelFile.Tests;

/// <summary>Rules of the JSON Schema (docs/model-file.schema.json): fields, types, ranges, what each feature type allows.</summary>
public sealed class SchemaRulesTests
{
    [Fact]
    public void Minimal_file_is_valid_with_no_problem()
    {
        Problems.None(ModelFiles.Read(ModelFiles.Minimal));
    }

    [Fact]
    public void Full_file_is_valid_with_no_problem()
    {
        Problems.None(ModelFiles.Read(ModelFiles.Full));
    }

    [Theory]
    [InlineData("scorer.model/2")]
    [InlineData("scorer.model/1.1")]
    [InlineData("other.model/1")]
    public void Unknown_format_is_rejected_with_that_error_alone(string format)
    {
        // The rest of the file is broken too; nothing else is reported, as v1 rules say nothing about another format.
        var result = ModelFiles.ReadChanged(root =>
        {
            root["format"] = format;
            root["threshold"] = 7;
        });

        var error = Problems.SingleErrorAt(result, "$.format");

        Problems.Contains($"unknown format '{format}'", error);
        Problems.Contains(ModelDocument.FormatV1, error);
    }

    [Fact]
    public void Format_that_is_not_a_string_is_rejected()
    {
        Problems.SingleErrorAt(ModelFiles.ReadChanged(root => root["format"] = 1), "$.format");
    }

    [Fact]
    public void Missing_format_is_rejected()
    {
        var error = Problems.SingleErrorAt(ModelFiles.ReadChanged(root => root.Remove("format")), "$");

        Problems.Contains("format", error);
    }

    [Theory]
    [InlineData("model")]
    [InlineData("version")]
    [InlineData("link")]
    [InlineData("outcome")]
    [InlineData("features")]
    [InlineData("terms")]
    public void Missing_required_field_is_rejected_and_named(string field)
    {
        var result = ModelFiles.ReadChanged(root => root.Remove(field));

        Assert.Contains(result.Errors, e => e.Path == "$" && e.Reason.Contains(field, StringComparison.Ordinal));
        Assert.Null(result.Document);
    }

    [Fact]
    public void Unknown_top_level_field_is_rejected_with_its_path()
    {
        var error = Problems.SingleErrorAt(ModelFiles.ReadChanged(root => root["colour"] = "blue"), "$.colour");

        Problems.Contains("unknown or misplaced field", error);
    }

    [Fact]
    public void Extension_field_is_kept_as_written()
    {
        var result = ModelFiles.ReadChanged(root =>
        {
            root["x-owner"] = "asset-analytics";
            root["x-lineage"] = ModelFiles.Json("""{ "job": 17, "inputs": ["a", "b"] }""");
        });

        Problems.None(result);
        var extensions = result.Document!.Extensions;
        Assert.Equal(["x-lineage", "x-owner"], extensions.Keys.Order(StringComparer.Ordinal));
        Assert.Equal("asset-analytics", extensions["x-owner"].GetString());
        Assert.True(JsonElement.DeepEquals(JsonDocument.Parse("""{"job":17,"inputs":["a","b"]}""").RootElement, extensions["x-lineage"]));
    }

    [Fact]
    public void Extension_field_is_only_allowed_at_the_top_level()
    {
        var error = Problems.SingleErrorAt(ModelFiles.ReadChanged(root => root["outcome"]!["x-note"] = "n"), "$.outcome.x-note");

        Problems.Contains("unknown or misplaced field", error);
    }

    [Fact]
    public void Unknown_field_in_a_feature_is_rejected_with_its_path()
    {
        Problems.SingleErrorAt(ModelFiles.ReadChanged(root => root["features"]![0]!["unit"] = "mm/s"), "$.features[0].unit");
    }

    [Fact]
    public void Levels_on_a_numeric_feature_are_rejected()
    {
        var result = ModelFiles.ReadChanged(root => root["features"]![0]!["levels"] = ModelFiles.Json("""["low", "high"]"""));

        Problems.Contains("unknown or misplaced field", Problems.SingleErrorAt(result, "$.features[0].levels"));
    }

    [Fact]
    public void Training_range_on_a_categorical_feature_is_rejected()
    {
        Problems.SingleErrorAt(ModelFiles.ReadChanged(root => root["features"]![1]!["min"] = 0), "$.features[1].min");
    }

    [Fact]
    public void Categorical_feature_without_levels_is_rejected()
    {
        var result = ModelFiles.ReadChanged(root => root["features"]!.AsArray().Add(ModelFiles.Json(
            """{ "name": "pump_model", "type": "categorical", "reference": "a" }""")));

        Assert.Contains(result.Errors, e => e.Path == "$.features[2]" && e.Reason.Contains("levels", StringComparison.Ordinal));
    }

    [Fact]
    public void Missing_mean_policy_on_a_categorical_feature_is_rejected()
    {
        var result = ModelFiles.ReadChanged(root =>
        {
            root["features"]![1]!["missing"] = "mean";
        });

        Assert.Contains(result.Errors, e => e.Path == "$.features[1].missing");
        Assert.Null(result.Document);
    }

    [Fact]
    public void Missing_mean_policy_without_a_mean_is_rejected()
    {
        var error = Problems.SingleErrorAt(ModelFiles.ReadChanged(root => root["features"]![0]!["missing"] = "mean"), "$.features[0]");

        Problems.Contains("mean", error);
    }

    [Fact]
    public void Unknown_policy_on_a_numeric_feature_is_rejected()
    {
        Problems.SingleErrorAt(ModelFiles.ReadChanged(root => root["features"]![0]!["unknown"] = "reference"), "$.features[0].unknown");
    }

    [Fact]
    public void Unknown_link_is_rejected()
    {
        Problems.SingleErrorAt(ModelFiles.ReadChanged(root => root["link"] = "cauchit"), "$.link");
    }

    [Theory]
    [InlineData(0.0)]
    [InlineData(1.0)]
    [InlineData(-0.2)]
    [InlineData(1.5)]
    public void Threshold_outside_the_open_unit_interval_is_rejected(double threshold)
    {
        Problems.SingleErrorAt(ModelFiles.ReadChanged(root => root["threshold"] = threshold), "$.threshold");
    }

    [Theory]
    [InlineData("pump bearing")]
    [InlineData("1st_model")]
    [InlineData("")]
    public void Model_name_outside_the_name_pattern_is_rejected(string name)
    {
        Problems.ErrorsOnlyAt(ModelFiles.ReadChanged(root => root["model"] = name), "$.model");
    }

    [Theory]
    [InlineData("")]
    [InlineData("-1")]
    [InlineData("1.0 beta")]
    public void Version_outside_the_version_pattern_is_rejected(string version)
    {
        Problems.ErrorsOnlyAt(ModelFiles.ReadChanged(root => root["version"] = version), "$.version");
    }

    [Fact]
    public void Unknown_negatives_policy_is_rejected()
    {
        Problems.SingleErrorAt(ModelFiles.ReadChanged(root => root["outcome"]!["negatives"] = "assumed"), "$.outcome.negatives");
    }

    [Fact]
    public void Model_without_terms_is_rejected()
    {
        var result = ModelFiles.ReadChanged(root =>
        {
            root["terms"] = new System.Text.Json.Nodes.JsonArray();
            root.Remove("covariance");
        });

        Assert.Contains(result.Errors, e => e.Path == "$.terms");
        Assert.Null(result.Document);
    }

    [Theory]
    [InlineData(0.0)]
    [InlineData(-2.0)]
    public void Factor_scale_that_is_not_positive_is_rejected(double scale)
    {
        var result = ModelFiles.ReadChanged(root => root["terms"]![1]!["factors"]![0]!["scale"] = scale);

        Assert.Contains(result.Errors, e => e.Path == "$.terms[1].factors[0].scale");
        Assert.True(result.Errors.All(e => e.Path.StartsWith("$.terms[1].factors[0]", StringComparison.Ordinal)), Problems.List(result));
    }

    [Fact]
    public void Unknown_transform_is_rejected()
    {
        var result = ModelFiles.ReadChanged(root => root["terms"]![1]!["factors"]![0]!["transform"] = "exp");

        Assert.Contains(result.Errors, e => e.Path == "$.terms[1].factors[0].transform");
        Assert.True(result.Errors.All(e => e.Path.StartsWith("$.terms[1].factors[0]", StringComparison.Ordinal)), Problems.List(result));
    }

    [Fact]
    public void Factor_with_both_a_level_and_a_scale_is_rejected_at_that_factor()
    {
        var result = ModelFiles.ReadChanged(root => root["terms"]![2]!["factors"]![0]!["scale"] = 2);

        Assert.NotEmpty(result.Errors);
        Assert.True(result.Errors.All(e => e.Path.StartsWith("$.terms[2].factors[0]", StringComparison.Ordinal)), Problems.List(result));
        Assert.Null(result.Document);
    }

    [Fact]
    public void Term_with_more_than_eight_factors_is_rejected()
    {
        var nine = "[" + string.Join(", ", Enumerable.Repeat("""{ "feature": "vibration_rms" }""", 9)) + "]";

        var result = ModelFiles.ReadChanged(root => root["terms"]![1]!["factors"] = ModelFiles.Json(nine));

        Assert.Contains(result.Errors, e => e.Path == "$.terms[1].factors");
        Assert.Null(result.Document);
    }

    [Fact]
    public void A_schema_error_does_not_bring_errors_from_branches_that_do_not_apply()
    {
        // With a numeric and a categorical feature, indicator and numeric factors, one schema error must stay one error:
        // the failed `if` of the other feature type and the unmatched branch of each factor's oneOf are not errors.
        var error = Problems.SingleErrorAt(ModelFiles.ReadChanged(root => root["description"] = 12), "$.description");

        Assert.DoesNotContain("false schema", error.Reason, StringComparison.Ordinal);
    }
}
