namespace Scorer.ModelFile.Tests;

/// <summary>What the loader warns of: the file stays valid and loads.</summary>
public sealed class WarningTests
{
    [Fact]
    public void File_without_covariance_is_valid_with_a_warning()
    {
        var result = ModelFiles.ReadChanged(root => root.Remove("covariance"));

        var warning = Problems.WarningAt(result, "$", "no covariance");

        Assert.Equal(ProblemSeverity.Warning, warning.Severity);
        Assert.Null(result.Document!.Covariance);
        Assert.Single(result.Problems);
    }

    [Fact]
    public void File_without_baseline_is_valid_with_a_warning()
    {
        var result = ModelFiles.ReadChanged(root => root.Remove("baseline"));

        Problems.WarningAt(result, "$", "no baseline");
        Assert.Null(result.Document!.Baseline);
        Assert.Single(result.Problems);
    }

    [Fact]
    public void Reference_level_used_as_an_indicator_is_valid_with_a_warning()
    {
        var result = ModelFiles.ReadChanged(root => root["terms"]![2]!["factors"]![0]!["level"] = "north");

        Problems.WarningAt(result, "$.terms[2].factors[0].level", "reference level");
        Assert.Equal("north", result.Document!.Terms[2].Factors[0].Level);
    }

    [Fact]
    public void Feature_unused_by_any_term_is_valid_with_a_warning()
    {
        var result = ModelFiles.ReadChanged(root => root["features"]!.AsArray().Add(ModelFiles.Json(
            """{ "name": "hours_since_service", "type": "numeric", "min": 0, "max": 4380 }""")));

        Problems.WarningAt(result, "$.features[2]", "not used by any term");
        Assert.Single(result.Problems);
    }

    [Theory]
    [InlineData("log", 0.0)]
    [InlineData("log", -3.0)]
    [InlineData("log1p", -1.0)]
    [InlineData("sqrt", -0.5)]
    public void Transform_whose_domain_excludes_the_training_minimum_is_valid_with_a_warning(string transform, double min)
    {
        var result = ModelFiles.ReadChanged(root =>
        {
            root["features"]![0]!["min"] = min;
            root["terms"]![1]!["factors"]![0]!["transform"] = transform;
        });

        Problems.WarningAt(result, "$.terms[1].factors[0].transform", "training minimum");
    }

    [Theory]
    [InlineData("sqrt", 0.0)]
    [InlineData("log1p", -0.5)]
    [InlineData("log", 1e-9)]
    public void Transform_whose_domain_holds_the_training_minimum_gives_no_warning(string transform, double min)
    {
        var result = ModelFiles.ReadChanged(root =>
        {
            root["features"]![0]!["min"] = min;
            root["terms"]![1]!["factors"]![0]!["transform"] = transform;
        });

        Problems.None(result);
    }

    [Fact]
    public void Numeric_feature_without_a_training_range_is_valid_with_a_warning()
    {
        var result = ModelFiles.ReadChanged(root => root["features"]![0]!.AsObject().Remove("max"));

        Problems.WarningAt(result, "$.features[0]", "no training range");
    }

    [Fact]
    public void Imputation_mean_outside_the_training_range_is_valid_with_a_warning()
    {
        var result = ModelFiles.ReadChanged(root =>
        {
            root["features"]![0]!["missing"] = "mean";
            root["features"]![0]!["mean"] = 20.0;
        });

        Problems.WarningAt(result, "$.features[0].mean", "outside the training range");
    }

    [Fact]
    public void Indicators_of_two_levels_in_one_term_are_valid_with_a_warning()
    {
        var result = ModelFiles.ReadChanged(root => root["terms"]![3]!["factors"] = ModelFiles.Json(
            """[{ "feature": "site", "level": "river" }, { "feature": "site", "level": "east" }]"""));

        Problems.WarningAt(result, "$.terms[3].factors", "always 0");
    }

    [Fact]
    public void Warnings_are_not_errors()
    {
        var result = ModelFiles.ReadChanged(root =>
        {
            root.Remove("covariance");
            root.Remove("baseline");
            root["terms"]![2]!["factors"]![0]!["level"] = "north";
        });

        Assert.Equal(3, result.Warnings.Count());
        Assert.Empty(result.Errors);
        Assert.True(result.IsValid);
    }
}
