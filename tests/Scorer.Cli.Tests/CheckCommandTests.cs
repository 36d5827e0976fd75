using System.Text.Json;

namespace Scorer.Cli.Tests;

public sealed class CheckCommandTests : IDisposable
{
    private readonly CliRunner _cli = new();

    public void Dispose() => _cli.Dispose();

    [Fact]
    public void A_valid_file_exits_0_and_says_what_it_holds()
    {
        // A model file written by R (tests/reference/scoring-reference.R) from glm() on MASS::birthwt.
        var (exit, stdout, _) = _cli.Run("check", CliRunner.Reference("birthwt-logit.model.json"));
        Assert.Equal(0, exit);
        Assert.Contains("valid: birthwt r-logit, logit link, 7 features, 11 terms, covariance positive definite", stdout, StringComparison.Ordinal);
    }

    [Fact]
    public void An_invalid_file_exits_1_and_prints_every_error_with_its_path()
    {
        var text = File.ReadAllText(CliRunner.Reference("infert-logit.model.json"))
            .Replace("\"reference\": \"0-5yrs\"", "\"reference\": \"none\"", StringComparison.Ordinal)
            .Replace("\"feature\": \"parity\"", "\"feature\": \"parities\"", StringComparison.Ordinal)
            .Replace("\"link\": \"logit\"", "\"link\": \"logistic\"", StringComparison.Ordinal);
        var (exit, stdout, _) = _cli.Run("check", _cli.Write("broken.json", text));
        Assert.Equal(1, exit);
        Assert.Contains("error $.features[0].reference: reference level 'none' is not one of the levels", stdout, StringComparison.Ordinal);
        Assert.Contains("error $.terms[4].factors[0].feature: 'parities' is not a declared feature", stdout, StringComparison.Ordinal);
        Assert.Contains("error $.link:", stdout, StringComparison.Ordinal);
        Assert.Contains("invalid: 3 errors", stdout, StringComparison.Ordinal);
    }

    [Fact]
    public void Json_output_lists_each_problem_with_its_path_and_reason()
    {
        var text = File.ReadAllText(CliRunner.Reference("infert-logit.model.json")).Replace("\"version\": \"r-logit\"", "\"version\": \"\"", StringComparison.Ordinal);
        var (exit, stdout, _) = _cli.Run("check", "--json", _cli.Write("v.json", text));
        Assert.Equal(1, exit);
        using var doc = JsonDocument.Parse(stdout);
        Assert.False(doc.RootElement.GetProperty("valid").GetBoolean());
        var problem = doc.RootElement.GetProperty("problems").EnumerateArray().First(p => p.GetProperty("severity").GetString() == "error");
        Assert.Equal("$.version", problem.GetProperty("path").GetString());
        Assert.False(string.IsNullOrEmpty(problem.GetProperty("reason").GetString()));
    }

    [Fact]
    public void A_missing_file_exits_1_with_a_message()
    {
        var (exit, _, stderr) = _cli.Run("check", Path.Combine(_cli.Folder, "nope.json"));
        Assert.Equal(1, exit);
        Assert.Contains("cannot read", stderr, StringComparison.Ordinal);
    }
}
