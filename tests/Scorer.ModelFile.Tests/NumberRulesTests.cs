namespace Scorer.ModelFile.Tests;

/// <summary>Every number of a model file must fit a finite double.</summary>
public sealed class NumberRulesTests
{
    [Theory]
    [InlineData("1e400")]
    [InlineData("-1e400")]
    [InlineData("1.8e308")]
    public void Coefficient_that_overflows_a_double_is_rejected_with_its_path(string number)
    {
        var text = ModelFiles.Replaced(ModelFiles.Minimal, "\"coefficient\": 0.9,", $"\"coefficient\": {number},");

        var error = Problems.SingleErrorAt(ModelFiles.Read(text), "$.terms[1].coefficient");

        Problems.Contains("does not fit a finite double", error);
        Problems.Contains(number, error);
    }

    [Fact]
    public void Covariance_entry_that_overflows_a_double_is_rejected_with_its_path()
    {
        var text = ModelFiles.Replaced(ModelFiles.Minimal, "[-0.01, 0.04, 0.0, 0.005]", "[-0.01, 1e400, 0.0, 0.005]");

        Problems.Contains("does not fit a finite double", Problems.SingleErrorAt(ModelFiles.Read(text), "$.covariance[1][1]"));
    }

    [Fact]
    public void Overflowing_threshold_is_rejected_at_the_threshold()
    {
        var text = ModelFiles.Replaced(ModelFiles.Minimal, "\"baseline\":", "\"threshold\": 1e400, \"baseline\":");

        var errors = Problems.ErrorsOnlyAt(ModelFiles.Read(text), "$.threshold");

        Assert.Contains(errors, e => e.Reason.Contains("does not fit a finite double", StringComparison.Ordinal));
    }

    [Fact]
    public void Overflowing_training_count_is_rejected_without_a_second_error_about_events()
    {
        var text = ModelFiles.Replaced(ModelFiles.Minimal, "\"n\": 1000", "\"n\": 1e400");

        Problems.SingleErrorAt(ModelFiles.Read(text), "$.baseline.n");
    }

    [Fact]
    public void Overflowing_number_in_the_free_form_fit_section_is_rejected_too()
    {
        var text = ModelFiles.Replaced(ModelFiles.Minimal, "\"baseline\":", "\"fit\": { \"aic\": 1e999 }, \"baseline\":");

        Problems.SingleErrorAt(ModelFiles.Read(text), "$.fit.aic");
    }

    [Fact]
    public void Overflowing_baseline_proportion_does_not_throw()
    {
        var text = ModelFiles.Changed(root => root["baseline"]!["features"] = ModelFiles.Json(
            """{ "site": { "levels": { "north": 0.5, "east": 0.5, "river": 0 } } }"""));
        text = ModelFiles.Replaced(text, "\"river\":0", "\"river\":1e400");

        var result = ModelFiles.Read(text);

        Assert.Contains(result.Errors, e => e.Path == "$.baseline.features.site.levels.river");
        Assert.Null(result.Document);
    }

    [Fact]
    public void Shortest_round_trip_numbers_are_read_exactly()
    {
        var text = ModelFiles.Replaced(ModelFiles.Minimal, "\"coefficient\": 0.9,", "\"coefficient\": 0.30000000000000004,");

        var document = ModelFiles.Read(text).Document!;

        Assert.Equal(0.1 + 0.2, document.Terms[1].Coefficient);
    }
}
