using System.Text.RegularExpressions;

namespace Scorer.ModelFile.Tests;

/// <summary>docs/model-file.md says what the loader does: its example loads, and its worked numbers hold.</summary>
public sealed partial class ReferenceDocumentTests
{
    private static readonly string Text = Repository.ReadText("docs", "model-file.md");

    [GeneratedRegex(@"```json\n(.*?)\n```", RegexOptions.Singleline)]
    private static partial Regex JsonBlock();

    private static ModelDocument Example()
    {
        var result = ModelFiles.Read(JsonBlock().Match(Text).Groups[1].Value);
        Problems.None(result);
        return result.Document!;
    }

    [Fact]
    public void Reference_document_links_the_schema()
    {
        Assert.Contains("(model-file.schema.json)", Text, StringComparison.Ordinal);
    }

    [Fact]
    public void Complete_example_is_valid_without_warnings()
    {
        var example = Example();

        Assert.Equal("pump_bearing_failure", example.Model);
        Assert.Equal(["vibration_rms", "bearing_temp_c", "hours_since_service", "site"], example.Features.Select(f => f.Name));
        Assert.Equal(7, example.Terms.Length);
    }

    [Fact]
    public void Snapshot_scored_by_hand_in_the_example_gives_the_stated_numbers()
    {
        // vibration_rms = 4.2, bearing_temp_c = 61, hours_since_service = 3100, site = river.
        var numeric = new Dictionary<string, double> { ["vibration_rms"] = 4.2, ["bearing_temp_c"] = 61, ["hours_since_service"] = 3100 };
        var eta = 0.0;
        foreach (var term in Example().Terms)
        {
            var value = 1.0;
            foreach (var f in term.Factors)
            {
                value *= f.IsIndicator
                    ? (f.Level == "river" ? 1 : 0)
                    : ((f.Transform == TransformKind.Log ? Math.Log(numeric[f.Feature]) : numeric[f.Feature]) - f.Center) / f.Scale;
            }

            eta += term.Coefficient * value;
        }

        Assert.Equal(-0.5969, eta, 4);
        Assert.Equal(0.355, 1 / (1 + Math.Exp(-eta)), 3);
        Assert.Contains("= −0.5969", Text, StringComparison.Ordinal);
        Assert.Contains("= 0.355", Text, StringComparison.Ordinal);
    }

    [Fact]
    public void Prior_correction_example_is_minus_ln_49()
    {
        var (ybar, tau) = (0.5, 0.02);

        Assert.Equal(-3.892, -Math.Log((1 - tau) / tau * (ybar / (1 - ybar))), 3);
        Assert.Contains("−ln 49 ≈ −3.892", Text, StringComparison.Ordinal);
    }
}
