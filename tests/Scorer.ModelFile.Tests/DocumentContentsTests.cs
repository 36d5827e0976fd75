namespace Scorer.ModelFile.Tests;

/// <summary>What a valid file reads as, and the defaults of the fields a file leaves out.</summary>
public sealed class DocumentContentsTests
{
    private static ModelDocument Minimal => ModelFiles.Read(ModelFiles.Minimal).Document!;

    [Fact]
    public void Top_level_fields_are_read()
    {
        var d = Minimal;

        Assert.Equal(ModelDocument.FormatV1, d.Format);
        Assert.Equal("pump_bearing_30d", d.Model);
        Assert.Equal("1.0.0", d.Version);
        Assert.Null(d.Description);
        Assert.Equal(LinkKind.Logit, d.Link);
        Assert.Equal(new OutcomeSpec("bearing_failure", "bearing failed", "P30D", NegativesPolicy.Explicit), d.Outcome);
        Assert.Null(d.Threshold);
        Assert.Null(d.Sampling);
        Assert.Null(d.Fit);
        Assert.Empty(d.Extensions);
    }

    [Fact]
    public void Missing_and_unknown_policies_default_to_reject()
    {
        var d = Minimal;

        Assert.Equal(MissingPolicy.Reject, d.Features[0].Missing);
        Assert.Equal(MissingPolicy.Reject, d.Features[1].Missing);
        Assert.Equal(UnknownLevelPolicy.Reject, d.Features[1].Unknown);
    }

    [Fact]
    public void Levels_keep_their_declared_order()
    {
        var site = Minimal.Features[1];

        Assert.Equal(FeatureKind.Categorical, site.Kind);
        Assert.Equal(["north", "east", "river"], site.Levels.ToArray());
        Assert.Equal("north", site.Reference);
    }

    [Fact]
    public void Factor_defaults_are_identity_center_0_scale_1()
    {
        var result = ModelFiles.ReadChanged(root => root["terms"]![1]!["factors"]![0]!.AsObject().Remove("transform"));
        var factor = result.Document!.Terms[1].Factors[0];

        Assert.Equal(new FactorSpec { Feature = "vibration_rms", Transform = TransformKind.Identity, Center = 0, Scale = 1 }, factor);
        Assert.False(factor.IsIndicator);
    }

    [Fact]
    public void Term_without_factors_is_the_intercept()
    {
        var terms = Minimal.Terms;

        Assert.True(terms[0].IsIntercept);
        Assert.All(terms.Skip(1), t => Assert.False(t.IsIntercept));
        Assert.True(terms[2].Factors[0].IsIndicator);
    }

    [Fact]
    public void Model_without_an_intercept_is_valid()
    {
        var result = ModelFiles.ReadChanged(root =>
        {
            root["terms"]!.AsArray().RemoveAt(0);
            root.Remove("covariance");
        });

        Assert.Empty(result.Errors);
        Assert.DoesNotContain(result.Document!.Terms, t => t.IsIntercept);
    }

    [Fact]
    public void Model_with_no_features_and_only_an_intercept_is_valid()
    {
        var result = ModelFiles.ReadChanged(root =>
        {
            root["features"] = new System.Text.Json.Nodes.JsonArray();
            root["terms"] = ModelFiles.Json("""[{ "name": "(Intercept)", "coefficient": -2.6, "factors": [] }]""");
            root["covariance"] = ModelFiles.Json("[[0.01]]");
        });

        Problems.None(result);
    }

    [Fact]
    public void Fit_section_is_kept_as_written()
    {
        var fit = ModelFiles.Read(ModelFiles.Full).Document!.Fit!.Value;

        Assert.Equal("IRLS", fit.GetProperty("method").GetString());
        Assert.Equal(6, fit.GetProperty("iterations").GetInt32());
    }

    [Fact]
    public void Fit_section_may_hold_any_fields()
    {
        var result = ModelFiles.ReadChanged(root => root["fit"] = ModelFiles.Json("""{ "anything": [1, "two", null, { "deep": true }] }"""));

        Problems.None(result);
    }
}
