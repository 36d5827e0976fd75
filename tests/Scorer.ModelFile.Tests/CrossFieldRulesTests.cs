namespace Scorer.ModelFile.Tests;

/// <summary>Rules between fields that the schema cannot express: names, references from terms to features and levels.</summary>
public sealed class CrossFieldRulesTests
{
    private const string HoursFeature = """{ "name": "hours_since_service", "type": "numeric", "min": 0, "max": 4380 }""";

    [Fact]
    public void Duplicate_feature_name_is_rejected_with_its_path_and_the_first_one()
    {
        var result = ModelFiles.ReadChanged(root => root["features"]!.AsArray().Add(ModelFiles.Json(
            """{ "name": "site", "type": "categorical", "levels": ["a"], "reference": "a" }""")));

        var error = Problems.SingleErrorAt(result, "$.features[2].name");

        Problems.Contains("duplicate feature name 'site'", error);
        Problems.Contains("$.features[1]", error);
    }

    [Fact]
    public void A_feature_named_linear_predictor_is_refused_because_the_name_belongs_to_the_drift_series_of_eta()
    {
        var result = ModelFiles.ReadChanged(root => root["features"]!.AsArray().Add(ModelFiles.Json(
            """{ "name": "linear_predictor", "type": "numeric", "min": 0, "max": 1 }""")));

        var error = Problems.SingleErrorAt(result, "$.features[2].name");
        Problems.Contains("'linear_predictor' is reserved", error);
    }

    [Fact]
    public void Duplicate_term_name_is_rejected_with_its_path_and_the_first_one()
    {
        var error = Problems.SingleErrorAt(ModelFiles.ReadChanged(root => root["terms"]![3]!["name"] = "site_east"), "$.terms[3].name");

        Problems.Contains("duplicate term name 'site_east'", error);
        Problems.Contains("$.terms[2]", error);
    }

    [Fact]
    public void Term_referencing_an_undeclared_feature_is_rejected_with_its_path()
    {
        var result = ModelFiles.ReadChanged(root => root["terms"]![2]!["factors"]![0] = ModelFiles.Json("""{ "feature": "flow_rate" }"""));

        var error = Problems.SingleErrorAt(result, "$.terms[2].factors[0].feature");

        Problems.Contains("'flow_rate' is not a declared feature", error);
    }

    [Fact]
    public void Term_referencing_an_undeclared_level_is_rejected_with_its_path()
    {
        var result = ModelFiles.ReadChanged(root => root["terms"]![2]!["factors"]![0]!["level"] = "south");

        var error = Problems.SingleErrorAt(result, "$.terms[2].factors[0].level");

        Problems.Contains("'south' is not a level of 'site'", error);
    }

    [Fact]
    public void Levels_are_compared_exactly()
    {
        var result = ModelFiles.ReadChanged(root => root["terms"]![2]!["factors"]![0]!["level"] = "East");

        Problems.SingleErrorAt(result, "$.terms[2].factors[0].level");
    }

    [Fact]
    public void Reference_level_outside_the_levels_is_rejected_with_its_path()
    {
        var error = Problems.SingleErrorAt(ModelFiles.ReadChanged(root => root["features"]![1]!["reference"] = "south"), "$.features[1].reference");

        Problems.Contains("reference level 'south'", error);
    }

    [Fact]
    public void Duplicate_level_is_rejected_with_its_path()
    {
        var result = ModelFiles.ReadChanged(root => root["features"]![1]!["levels"] = ModelFiles.Json("""["north", "east", "river", "east"]"""));

        Problems.SingleErrorAt(result, "$.features[1].levels[3]");
    }

    [Fact]
    public void Training_minimum_above_the_maximum_is_rejected()
    {
        var result = ModelFiles.ReadChanged(root =>
        {
            root["features"]![0]!["min"] = 12.0;
            root["features"]![0]!["max"] = 11.5;
        });

        Problems.SingleErrorAt(result, "$.features[0].min");
    }

    [Fact]
    public void Level_of_a_numeric_feature_is_rejected()
    {
        var result = ModelFiles.ReadChanged(root => root["terms"]![1]!["factors"]![0] = ModelFiles.Json("""{ "feature": "vibration_rms", "level": "high" }"""));

        Problems.Contains("numeric", Problems.SingleErrorAt(result, "$.terms[1].factors[0].level"));
    }

    [Fact]
    public void Categorical_feature_used_without_a_level_is_rejected()
    {
        var result = ModelFiles.ReadChanged(root => root["terms"]![2]!["factors"]![0] = ModelFiles.Json("""{ "feature": "site" }"""));

        Problems.Contains("needs a 'level'", Problems.SingleErrorAt(result, "$.terms[2].factors[0]"));
    }

    [Fact]
    public void Second_intercept_is_rejected()
    {
        var result = ModelFiles.ReadChanged(root => root["terms"]![2]!["factors"] = new System.Text.Json.Nodes.JsonArray());

        Problems.Contains("$.terms[0]", Problems.SingleErrorAt(result, "$.terms[2]"));
    }

    [Fact]
    public void Terms_with_the_same_factors_in_another_order_are_rejected_as_aliased()
    {
        var result = ModelFiles.ReadChanged(root =>
        {
            root["features"]!.AsArray().Add(ModelFiles.Json(HoursFeature));
            root["terms"]![2]!["factors"] = ModelFiles.Json("""[{ "feature": "site", "level": "east" }, { "feature": "hours_since_service" }]""");
            root["terms"]![3]!["factors"] = ModelFiles.Json("""[{ "feature": "hours_since_service" }, { "feature": "site", "level": "east" }]""");
        });

        Problems.Contains("aliased", Problems.SingleErrorAt(result, "$.terms[3]"));
    }

    [Fact]
    public void Same_feature_with_another_center_is_a_different_term()
    {
        var result = ModelFiles.ReadChanged(root =>
        {
            root["terms"]![2]!["factors"] = ModelFiles.Json("""[{ "feature": "vibration_rms" }]""");
            root["terms"]![3]!["factors"] = ModelFiles.Json("""[{ "feature": "vibration_rms", "center": 3 }]""");
        });

        Assert.Empty(result.Errors);
    }

    [Theory]
    [InlineData("log", 0.0)]
    [InlineData("log", -1.0)]
    [InlineData("log1p", -1.0)]
    [InlineData("sqrt", -0.5)]
    public void Imputation_mean_outside_the_domain_of_the_transform_is_rejected(string transform, double mean)
    {
        var result = ModelFiles.ReadChanged(root =>
        {
            root["features"]![0]!["min"] = -2.0;
            root["features"]![0]!["missing"] = "mean";
            root["features"]![0]!["mean"] = mean;
            root["terms"]![1]!["factors"]![0]!["transform"] = transform;
        });

        Problems.Contains("imputation mean", Problems.SingleErrorAt(result, "$.terms[1].factors[0].transform"));
    }
}
