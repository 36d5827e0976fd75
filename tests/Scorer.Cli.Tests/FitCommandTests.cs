using System.Globalization;
using System.Text.Json;
using Scorer.ModelFile;

namespace Scorer.Cli.Tests;

public sealed class FitCommandTests : IDisposable
{
    private readonly CliRunner _cli = new();

    public void Dispose() => _cli.Dispose();

    private static string Example(string file) => Path.Combine(CliRunner.RepositoryRoot, "examples", "pump-bearings", file);

    [Fact]
    public void Fit_writes_a_model_file_that_check_accepts_and_prints_the_coefficient_table()
    {
        // birthwt (Debian r-cran-mass) as written by tests/reference/fitting-reference.R; estimates checked against R there.
        var output = Path.Combine(_cli.Folder, "fit.json");
        var (exit, stdout, stderr) = _cli.Run("fit", "--data", CliRunner.Reference("birthwt.train.csv"), "--outcome", "low",
            "--numeric", "age,lwt,smoke,ht,ui,ptl", "--categorical", "race", "--reference", "race=white", "--transform", "lwt=log",
            "--interaction", "lwt:race", "--model", "birthwt", "--new-version", "2", "--output", output, "--quiet");
        Assert.True(exit == 0, stderr);
        Assert.Contains("birthwt 2: logit link, 189 rows, 59 events", stdout, StringComparison.Ordinal);
        Assert.Contains("log(lwt):race=other", stdout, StringComparison.Ordinal);
        Assert.Contains("likelihood ratio against the intercept-only model", stdout, StringComparison.Ordinal);
        Assert.Equal(0, _cli.Run("check", output).Exit);

        // R's estimate of log(lwt), from fitting-reference.R.
        var r = File.ReadAllLines(CliRunner.Reference("fit-birthwt-logit.coefficients.csv")).Single(l => l.StartsWith("\"log(lwt)\"", StringComparison.Ordinal));
        var expected = double.Parse(r.Split(',')[1].Trim('"'), CultureInfo.InvariantCulture);
        var doc = ModelFileReader.ReadValidFile(output);
        Assert.Equal(expected, doc.Terms.Single(t => t.Name == "log(lwt)").Coefficient, 7);
    }

    [Fact]
    public void A_refit_with_like_reproduces_the_design_of_the_live_model()
    {
        var output = Path.Combine(_cli.Folder, "refit.json");
        var (exit, _, stderr) = _cli.Run("fit", "--data", Example("training.csv"), "--outcome", "failed_within_30d",
            "--like", Example("model.json"), "--new-version", "2026.12.1", "--output", output, "--quiet");
        Assert.True(exit == 0, stderr);
        var live = ModelFileReader.ReadValidFile(Example("model.json"));
        var refit = ModelFileReader.ReadValidFile(output);
        Assert.Equal(live.Model, refit.Model);
        Assert.Equal("2026.12.1", refit.Version);
        Assert.Equal(live.Terms.Select(t => (t.Name, t.Factors.Length)), refit.Terms.Select(t => (t.Name, t.Factors.Length)));
        Assert.Equal(live.Features.Select(f => (f.Name, f.Kind, f.Missing)), refit.Features.Select(f => (f.Name, f.Kind, f.Missing)));
        Assert.Equal(live.Threshold, refit.Threshold);
        Assert.Equal(live.Outcome, refit.Outcome);

        // The demo generator fitted the same data with its own Newton iterations: the two fits meet.
        foreach (var (a, b) in live.Terms.Zip(refit.Terms))
        {
            Assert.Equal(a.Coefficient, b.Coefficient, 6);
        }
    }

    [Fact]
    public void Json_output_carries_the_fit_statistics()
    {
        var (exit, stdout, stderr) = _cli.Run("fit", "--data", Example("training.csv"), "--outcome", "failed_within_30d",
            "--numeric", "vibration_rms,hours_since_service", "--transform", "vibration_rms=log", "--link", "cloglog",
            "--model", "pump", "--new-version", "c1", "--json", "--quiet");
        Assert.True(exit == 0, stderr);
        using var json = JsonDocument.Parse(stdout);
        var fit = json.RootElement.GetProperty("fit");
        Assert.Equal("cloglog", fit.GetProperty("link").GetString());
        Assert.Equal(5000, fit.GetProperty("n").GetInt32());
        Assert.Equal(3, fit.GetProperty("coefficients").GetArrayLength());
        Assert.True(fit.GetProperty("deviance").GetDouble() < fit.GetProperty("null_deviance").GetDouble());
    }

    [Fact]
    public void A_fit_that_cannot_be_made_exits_1_naming_the_problem()
    {
        var (exit, _, stderr) = _cli.Run("fit", "--data", CliRunner.Reference("infert.train.csv"), "--outcome", "case",
            "--numeric", "spontaneous,induced,total", "--model", "m", "--new-version", "1", "--quiet");
        Assert.Equal(1, exit);
        Assert.Contains("total: is aliased", stderr, StringComparison.Ordinal);

        var (exit2, _, stderr2) = _cli.Run("fit", "--data", CliRunner.Reference("infert.train.csv"), "--outcome", "education",
            "--numeric", "age", "--model", "m", "--new-version", "1", "--quiet");
        Assert.Equal(1, exit2);
        Assert.Contains("education: is not binary", stderr2, StringComparison.Ordinal);
    }

    [Fact]
    public void A_spec_without_coefficients_gives_the_design()
    {
        var spec = _cli.Write("spec.json", """
            {
              "link": "probit",
              "features": [
                {"name": "vibration_rms", "type": "numeric"},
                {"name": "site", "type": "categorical", "levels": ["north", "east", "river"], "reference": "north"}
              ],
              "terms": [
                {"name": "(intercept)", "factors": []},
                {"name": "log(vibration_rms)", "factors": [{"feature": "vibration_rms", "transform": "log", "center": 1}]},
                {"name": "site=river", "factors": [{"feature": "site", "level": "river"}]},
                {"name": "site=east", "factors": [{"feature": "site", "level": "east"}]}
              ]
            }
            """);
        var output = Path.Combine(_cli.Folder, "fromspec.json");
        var (exit, _, stderr) = _cli.Run("fit", "--data", Example("training.csv"), "--outcome", "failed_within_30d", "--spec", spec,
            "--model", "pump-spec", "--new-version", "1", "--output", output, "--quiet");
        Assert.True(exit == 0, stderr);
        var doc = ModelFileReader.ReadValidFile(output);
        Assert.Equal(LinkKind.Probit, doc.Link);
        Assert.Equal(["(intercept)", "log(vibration_rms)", "site=river", "site=east"], doc.Terms.Select(t => t.Name));
        Assert.Equal(1.0, doc.Terms[1].Factors[0].Center);
        Assert.NotNull(doc.Features[0].Min);
        Assert.Equal(4, doc.Covariance!.Value.Length);
    }
}
