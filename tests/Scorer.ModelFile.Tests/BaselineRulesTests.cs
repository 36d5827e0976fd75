namespace Scorer.ModelFile.Tests;

/// <summary>The <c>baseline</c> section: binned distributions of the linear predictor and of the features in training.</summary>
public sealed class BaselineRulesTests
{
    private static ModelFileLoadResult WithLinearPredictor(string bins) =>
        ModelFiles.ReadChanged(root => root["baseline"]!["linear_predictor"] = ModelFiles.Json(bins));

    private static ModelFileLoadResult WithFeatures(string features) =>
        ModelFiles.ReadChanged(root => root["baseline"]!["features"] = ModelFiles.Json(features));

    [Fact]
    public void Baseline_is_read_with_its_bins()
    {
        var baseline = ModelFiles.Read(ModelFiles.Full).Document!.Baseline!;

        Assert.Equal(5200, baseline.N);
        Assert.Equal(364, baseline.Events);
        Assert.Equal(0.41, baseline.MaxSe);
        Assert.Equal([-4.0, -3, -2], baseline.LinearPredictor!.Edges.ToArray());
        Assert.Equal([0.2, 0.4, 0.3, 0.1], baseline.LinearPredictor.Proportions.ToArray());
        Assert.Equal([1.5, 3.0], baseline.Numeric["vibration_rms"].Edges.ToArray());
        Assert.Equal(0.3, baseline.Levels["site"]["east"]);
    }

    private static ModelFileLoadResult WithTermMeans(string means) =>
        ModelFiles.ReadChanged(root => root["baseline"]!["term_means"] = ModelFiles.Json(means));

    [Fact]
    public void Term_means_are_read_and_written_back_in_term_order()
    {
        var result = WithTermMeans("""{ "site_river": 0.2, "log(vibration_rms)": 0.85, "site_east": 0.35 }""");
        Problems.None(result);
        var means = result.Document!.Baseline!.TermMeans;
        Assert.Equal(0.85, means["log(vibration_rms)"]);
        var written = ModelFileWriter.WriteToString(result.Document, indented: false);
        Assert.Contains("\"term_means\":{\"log(vibration_rms)\":0.85,\"site_east\":0.35,\"site_river\":0.2}", written, StringComparison.Ordinal);
        Assert.Equal(means, ModelFileReader.Read(System.Text.Encoding.UTF8.GetBytes(written)).Document!.Baseline!.TermMeans);
    }

    [Fact]
    public void Term_means_for_some_terms_only_for_the_intercept_or_for_no_term_are_refused_naming_each()
    {
        Problems.Contains("no mean for 'site_east', 'site_river'", Problems.SingleErrorAt(WithTermMeans("""{ "log(vibration_rms)": 0.85 }"""), "$.baseline.term_means"));
        var withIntercept = WithTermMeans("""{ "(Intercept)": 1, "log(vibration_rms)": 0.85, "site_east": 0.35, "site_river": 0.2 }""");
        Problems.Contains("has no factors", Problems.SingleErrorAt(withIntercept, "$.baseline.term_means['(Intercept)']"));
        var unknown = WithTermMeans("""{ "log(vibration_rms)": 0.85, "site_east": 0.35, "site_river": 0.2, "site_west": 0.1 }""");
        Problems.Contains("is not a term of the model", Problems.SingleErrorAt(unknown, "$.baseline.term_means.site_west"));
    }

    [Fact]
    public void Edges_that_decrease_are_rejected_with_the_path_of_the_edge()
    {
        var result = WithLinearPredictor("""{ "edges": [-4, -2, -3], "proportions": [0.2, 0.4, 0.3, 0.1] }""");

        Problems.Contains("increase strictly", Problems.SingleErrorAt(result, "$.baseline.linear_predictor.edges[2]"));
    }

    [Fact]
    public void Repeated_edge_is_rejected()
    {
        var result = WithLinearPredictor("""{ "edges": [-4, -3, -3], "proportions": [0.2, 0.4, 0.3, 0.1] }""");

        Problems.SingleErrorAt(result, "$.baseline.linear_predictor.edges[2]");
    }

    [Theory]
    [InlineData("[0.2, 0.5, 0.3]")]
    [InlineData("[0.2, 0.3, 0.2, 0.2, 0.1]")]
    public void Proportions_of_the_wrong_length_are_rejected(string proportions)
    {
        var result = WithLinearPredictor($$"""{ "edges": [-4, -3, -2], "proportions": {{proportions}} }""");

        Problems.Contains("3 edges make 4 bins", Problems.SingleErrorAt(result, "$.baseline.linear_predictor.proportions"));
    }

    [Fact]
    public void Proportions_that_do_not_sum_to_one_are_rejected()
    {
        var result = WithLinearPredictor("""{ "edges": [-4, -3, -2], "proportions": [0.2, 0.4, 0.3, 0.2] }""");

        Problems.Contains("not 1", Problems.SingleErrorAt(result, "$.baseline.linear_predictor.proportions"));
    }

    [Fact]
    public void Proportions_that_sum_to_one_within_rounding_are_accepted()
    {
        var result = WithLinearPredictor("""{ "edges": [0], "proportions": [0.3333333, 0.6666667] }""");

        Problems.None(result);
    }

    [Fact]
    public void Numeric_feature_baseline_with_bad_proportions_is_rejected_with_its_path()
    {
        var result = WithFeatures("""{ "vibration_rms": { "edges": [1.5, 3.0], "proportions": [0.3, 0.5, 0.3] } }""");

        Problems.SingleErrorAt(result, "$.baseline.features.vibration_rms.proportions");
    }

    [Fact]
    public void Level_proportions_that_do_not_sum_to_one_are_rejected()
    {
        var result = WithFeatures("""{ "site": { "levels": { "north": 0.5, "east": 0.3, "river": 0.3 } } }""");

        Problems.SingleErrorAt(result, "$.baseline.features.site.levels");
    }

    [Fact]
    public void Baseline_of_an_undeclared_feature_is_rejected()
    {
        var result = WithFeatures("""{ "flow_rate": { "edges": [1], "proportions": [0.5, 0.5] } }""");

        Problems.SingleErrorAt(result, "$.baseline.features.flow_rate");
    }

    [Fact]
    public void Baseline_feature_name_with_a_dot_is_written_in_brackets_in_the_path()
    {
        var result = WithFeatures("""{ "temp.c": { "edges": [1], "proportions": [0.5, 0.5] } }""");

        Problems.SingleErrorAt(result, "$.baseline.features['temp.c']");
    }

    [Fact]
    public void Baseline_of_an_undeclared_level_is_rejected()
    {
        var result = WithFeatures("""{ "site": { "levels": { "north": 0.5, "east": 0.3, "river": 0.2, "south": 0 } } }""");

        Problems.SingleErrorAt(result, "$.baseline.features.site.levels.south");
    }

    [Fact]
    public void Numeric_feature_with_a_level_baseline_is_rejected()
    {
        var result = WithFeatures("""{ "vibration_rms": { "levels": { "low": 1 } } }""");

        Problems.Contains("'edges' and 'proportions'", Problems.SingleErrorAt(result, "$.baseline.features.vibration_rms"));
    }

    [Fact]
    public void Categorical_feature_with_a_binned_baseline_is_rejected()
    {
        var result = WithFeatures("""{ "site": { "edges": [1], "proportions": [0.5, 0.5] } }""");

        Problems.Contains("'levels'", Problems.SingleErrorAt(result, "$.baseline.features.site"));
    }

    [Fact]
    public void More_events_than_rows_is_rejected()
    {
        var result = ModelFiles.ReadChanged(root => root["baseline"]!["events"] = 1001);

        Problems.SingleErrorAt(result, "$.baseline.events");
    }

    [Fact]
    public void Negative_max_se_is_rejected()
    {
        var result = ModelFiles.ReadChanged(root => root["baseline"]!["max_se"] = -0.1);

        Problems.SingleErrorAt(result, "$.baseline.max_se");
    }

    [Fact]
    public void Training_count_that_is_not_an_integer_is_rejected()
    {
        var result = ModelFiles.ReadChanged(root => root["baseline"]!["n"] = 1000.5);

        Problems.SingleErrorAt(result, "$.baseline.n");
    }
}
