namespace Scorer.ModelFile.Tests;

/// <summary>A file is checked to the end: every error is reported at once, each at its own JSON path.</summary>
public sealed class AllErrorsAtOnceTests
{
    [Fact]
    public void Three_independent_cross_field_errors_give_three_errors_with_their_paths()
    {
        var result = ModelFiles.ReadChanged(root =>
        {
            root["features"]!.AsArray().Add(ModelFiles.Json("""{ "name": "site", "type": "categorical", "levels": ["a"], "reference": "a" }"""));
            root["terms"]![2]!["factors"]![0]!["level"] = "south";
            root["covariance"]![1]![3] = 0.5;
        });

        Assert.Equal(
            ["$.covariance[1][3]", "$.features[2].name", "$.terms[2].factors[0].level"],
            result.Errors.Select(e => e.Path).Order(StringComparer.Ordinal));
        Assert.Null(result.Document);
    }

    [Fact]
    public void Schema_number_and_cross_field_errors_are_reported_together()
    {
        var text = ModelFiles.Changed(root =>
        {
            root["threshold"] = 1.5;
            root["terms"]![3]!["name"] = "site_east";
            root["link"] = "probit";
            root["sampling"] = ModelFiles.Json("""{ "training_event_rate": 0.07, "population_event_rate": 0.02 }""");
        });
        text = ModelFiles.Replaced(text, "0.16", "1e400");

        var result = ModelFiles.Read(text);

        Assert.Equal(
            ["$.covariance[3][3]", "$.sampling", "$.terms[3].name", "$.threshold"],
            result.Errors.Select(e => e.Path).Order(StringComparer.Ordinal));
    }

    [Fact]
    public void Errors_in_several_features_and_terms_are_all_reported()
    {
        var result = ModelFiles.ReadChanged(root =>
        {
            root["features"]![0]!["min"] = 20;
            root["features"]![1]!["reference"] = "south";
            root["terms"]![1]!["factors"]![0]!["feature"] = "vibration";
            root["terms"]![3]!["factors"]![0]!["level"] = "lake";
        });

        Assert.Equal(
            ["$.features[0].min", "$.features[1].reference", "$.terms[1].factors[0].feature", "$.terms[3].factors[0].level"],
            result.Errors.Select(e => e.Path).Order(StringComparer.Ordinal));
    }

    [Fact]
    public void Errors_and_warnings_are_reported_together()
    {
        var result = ModelFiles.ReadChanged(root =>
        {
            root.Remove("baseline");
            root["terms"]![3]!["factors"]![0]!["level"] = "lake";
        });

        Assert.Equal(["$.terms[3].factors[0].level"], result.Errors.Select(e => e.Path));
        Assert.Equal(["$"], result.Warnings.Select(e => e.Path));
    }

    [Fact]
    public void Exception_of_ReadValid_lists_every_error()
    {
        var text = ModelFiles.Changed(root =>
        {
            root["terms"]![3]!["name"] = "site_east";
            root["covariance"]![1]![1] = -1;
        });

        var ex = Assert.Throws<ModelFileException>(() => ModelFileReader.ReadValid(new MemoryStream(System.Text.Encoding.UTF8.GetBytes(text))));

        Assert.Equal(2, ex.Problems.Count);
        Assert.Contains("$.terms[3].name", ex.Message, StringComparison.Ordinal);
        Assert.Contains("$.covariance[1][1]", ex.Message, StringComparison.Ordinal);
    }
}
