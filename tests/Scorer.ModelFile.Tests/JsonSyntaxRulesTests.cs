namespace Scorer.ModelFile.Tests;

/// <summary>Text that is not JSON, or JSON the loader refuses before looking at the model.</summary>
public sealed class JsonSyntaxRulesTests
{
    [Fact]
    public void Invalid_json_is_rejected_with_its_line_number()
    {
        var text = "{\n  \"format\": \"scorer.model/1\",\n  \"model\": pump\n}";

        var error = Problems.SingleErrorAt(ModelFiles.Read(text), "$");

        Problems.Contains("not valid JSON", error);
        Problems.Contains("line 3", error);
    }

    [Fact]
    public void Json_cut_short_is_rejected()
    {
        var text = ModelFiles.Minimal[..(ModelFiles.Minimal.Length / 2)];

        Problems.Contains("not valid JSON", Problems.SingleErrorAt(ModelFiles.Read(text), "$"));
    }

    [Fact]
    public void Empty_input_is_rejected()
    {
        Problems.Contains("not valid JSON", Problems.SingleErrorAt(ModelFiles.Read(""), "$"));
    }

    [Fact]
    public void Duplicate_json_property_is_rejected_and_named()
    {
        var text = ModelFiles.Replaced(ModelFiles.Minimal, "\"version\": \"1.0.0\",", "\"version\": \"1.0.0\", \"version\": \"1.0.1\",");

        var error = Problems.SingleErrorAt(ModelFiles.Read(text), "$");

        Problems.Contains("'version'", error);
    }

    [Fact]
    public void Duplicate_json_property_deep_in_the_file_is_rejected()
    {
        var text = ModelFiles.Replaced(ModelFiles.Minimal, "\"coefficient\": 0.25,", "\"coefficient\": 0.25, \"coefficient\": 0.3,");

        Problems.Contains("'coefficient'", Problems.SingleErrorAt(ModelFiles.Read(text), "$"));
    }

    [Fact]
    public void Trailing_comma_is_rejected()
    {
        var text = ModelFiles.Replaced(ModelFiles.Minimal, "\"events\": 70 }", "\"events\": 70, }");

        Problems.Contains("not valid JSON", Problems.SingleErrorAt(ModelFiles.Read(text), "$"));
    }

    [Fact]
    public void Comment_is_rejected()
    {
        var text = ModelFiles.Replaced(ModelFiles.Minimal, "\"link\": \"logit\",", "\"link\": \"logit\", // the usual link");

        Problems.Contains("not valid JSON", Problems.SingleErrorAt(ModelFiles.Read(text), "$"));
    }

    [Theory]
    [InlineData(14, true)]
    [InlineData(15, false)]
    public void Nesting_is_limited_to_16_levels_counting_the_top_level_object(int arrays, bool accepted)
    {
        // The top-level object and `fit` are two levels; the arrays inside make the rest.
        var nested = new string('[', arrays) + new string(']', arrays);
        var text = ModelFiles.Replaced(ModelFiles.Minimal, "\"baseline\":", "\"fit\": " + "{ \"trace\": " + nested + " }, \"baseline\":");

        Assert.Equal(accepted, ModelFiles.Read(text).IsValid);
    }

    [Fact]
    public void Nesting_deeper_than_16_levels_is_rejected()
    {
        var deep = new string('[', 20) + "1" + new string(']', 20);
        var text = ModelFiles.Replaced(ModelFiles.Minimal, "\"baseline\":", "\"fit\": { \"trace\": " + deep + " }, \"baseline\":");

        Problems.Contains("depth", Problems.SingleErrorAt(ModelFiles.Read(text), "$"));
    }

    [Theory]
    [InlineData("[]")]
    [InlineData("\"scorer.model/1\"")]
    [InlineData("42")]
    [InlineData("null")]
    public void Json_that_is_not_an_object_is_rejected(string text)
    {
        Problems.SingleErrorAt(ModelFiles.Read(text), "$");
    }
}
