namespace Scorer.ModelFile.Tests;

/// <summary>The outcome horizon: a positive ISO 8601 duration; a month counts as 30 days, a year as 365.</summary>
public sealed class HorizonRulesTests
{
    [Theory]
    [InlineData("P30D", 30 * 24.0)]
    [InlineData("PT12H", 12.0)]
    [InlineData("PT90M", 1.5)]
    [InlineData("P1W", 7 * 24.0)]
    [InlineData("P3M", 90 * 24.0)]
    [InlineData("P1Y", 365 * 24.0)]
    [InlineData("P1DT6H", 30.0)]
    public void Horizon_is_read_as_a_duration(string horizon, double hours)
    {
        var result = ModelFiles.ReadChanged(root => root["outcome"]!["horizon"] = horizon);

        Problems.None(result);
        Assert.Equal(horizon, result.Document!.Outcome.Horizon);
        Assert.Equal(TimeSpan.FromHours(hours), result.Document.Outcome.HorizonSpan);
    }

    [Theory]
    [InlineData("30 days")]
    [InlineData("30D")]
    [InlineData("P")]
    [InlineData("PT")]
    [InlineData("P1.5D")]
    [InlineData("p30d")]
    [InlineData("P30D ")]
    [InlineData("-P30D")]
    [InlineData("P1H")]
    [InlineData("")]
    public void Horizon_that_is_not_an_iso_8601_duration_is_rejected_at_the_horizon(string horizon)
    {
        var result = ModelFiles.ReadChanged(root => root["outcome"]!["horizon"] = horizon);

        Problems.ErrorsOnlyAt(result, "$.outcome.horizon");
    }

    [Theory]
    [InlineData("P0D")]
    [InlineData("PT0S")]
    [InlineData("P99999999999999999999Y")]
    public void Horizon_of_zero_or_absurd_length_is_rejected(string horizon)
    {
        var result = ModelFiles.ReadChanged(root => root["outcome"]!["horizon"] = horizon);

        Problems.Contains("not a positive ISO 8601 duration", Problems.SingleErrorAt(result, "$.outcome.horizon"));
    }

    [Fact]
    public void Horizon_with_digits_of_another_script_is_rejected_without_throwing()
    {
        // U+0663 ARABIC-INDIC DIGIT THREE: a regular expression's \d matches it, but it is no ISO 8601 digit.
        var result = ModelFiles.ReadChanged(root => root["outcome"]!["horizon"] = "P\u0663D");

        Problems.ErrorsOnlyAt(result, "$.outcome.horizon");
    }
}
