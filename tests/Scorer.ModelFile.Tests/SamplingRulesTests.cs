namespace Scorer.ModelFile.Tests;

/// <summary>The <c>sampling</c> section: King &amp; Zeng (2001) prior correction of the intercept, logit only.</summary>
public sealed class SamplingRulesTests
{
    [Fact]
    public void Sampling_on_a_logit_model_with_an_intercept_is_read()
    {
        var result = ModelFiles.ReadChanged(root => root["sampling"] = ModelFiles.Json(
            """{ "training_event_rate": 0.07, "population_event_rate": 0.02 }"""));

        Problems.None(result);
        Assert.Equal(new SamplingSpec(0.07, 0.02), result.Document!.Sampling);
    }

    [Fact]
    public void Sampling_does_not_change_the_intercept_in_the_document()
    {
        // The correction is applied when the model is compiled for scoring; the document keeps the fitted value.
        var result = ModelFiles.ReadChanged(root => root["sampling"] = ModelFiles.Json(
            """{ "training_event_rate": 0.5, "population_event_rate": 0.02 }"""));

        Assert.Equal(-3.1, result.Document!.Terms[0].Coefficient);
    }

    [Theory]
    [InlineData("probit")]
    [InlineData("cloglog")]
    public void Sampling_on_a_link_other_than_logit_is_rejected(string link)
    {
        var result = ModelFiles.ReadChanged(root =>
        {
            root["link"] = link;
            root["sampling"] = ModelFiles.Json("""{ "training_event_rate": 0.07, "population_event_rate": 0.02 }""");
        });

        Problems.Contains("logit link only", Problems.SingleErrorAt(result, "$.sampling"));
    }

    [Fact]
    public void Sampling_without_an_intercept_is_rejected()
    {
        var result = ModelFiles.ReadChanged(root =>
        {
            root["terms"]!.AsArray().RemoveAt(0);
            root.Remove("covariance");
            root["sampling"] = ModelFiles.Json("""{ "training_event_rate": 0.07, "population_event_rate": 0.02 }""");
        });

        Problems.Contains("no intercept", Problems.SingleErrorAt(result, "$.sampling"));
    }

    [Theory]
    [InlineData(0.0)]
    [InlineData(1.0)]
    [InlineData(1.2)]
    public void Event_rate_outside_the_open_unit_interval_is_rejected(double rate)
    {
        var result = ModelFiles.ReadChanged(root => root["sampling"] = ModelFiles.Json(
            $$"""{ "training_event_rate": 0.07, "population_event_rate": {{rate.ToString(System.Globalization.CultureInfo.InvariantCulture)}} }"""));

        Problems.SingleErrorAt(result, "$.sampling.population_event_rate");
    }

    [Fact]
    public void Sampling_without_both_rates_is_rejected()
    {
        var result = ModelFiles.ReadChanged(root => root["sampling"] = ModelFiles.Json("""{ "training_event_rate": 0.07 }"""));

        Problems.Contains("population_event_rate", Problems.SingleErrorAt(result, "$.sampling"));
    }
}
