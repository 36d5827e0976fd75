using System.Collections.Immutable;
using System.Diagnostics;
using System.Globalization;
using Scorer.ModelFile;
using Scorer.Testing;

namespace Scorer.Cli.Tests;

/// <summary>
/// <c>scorer recalibrate</c> with the model file R wrote from glm on MASS::Pima.tr (tests/reference/out/pima-logit.model.json)
/// and the Pima.te rows it scored (tests/reference/calibration/out/pima-logit.csv: p, y, eta), against R's glm run at
/// test time.
/// </summary>
public sealed class RecalibrateCommandTests : IDisposable
{
    private readonly CliRunner _cli = new();

    public void Dispose() => _cli.Dispose();

    private static string PimaModel => TestRepository.ReferenceFile("pima-logit.model.json");

    private static string Rows(string name) => TestRepository.CalibrationFile(name + ".csv");

    private (int Exit, string Out, string Err) Recalibrate(string model, string rows, string output, params string[] more) =>
        _cli.Run(["recalibrate", model, "--input", rows, "--eta", "eta", "--outcome", "y", "--output", output, .. more]);

    private static void Near(double expected, double actual, double tolerance, string what)
    {
        var error = expected == actual ? 0.0 : Math.Abs(actual - expected) / Math.Abs(expected);
        Assert.True(error <= tolerance, $"{what}: expected {expected:R}, got {actual:R}, relative error {error:E3} > {tolerance:E1}");
    }

    [Fact]
    public void Intercept_and_slope_writes_a_valid_model_with_coefficients_b_beta_plus_a_from_R()
    {
        var output = Path.Combine(_cli.Folder, "new.json");
        var (exit, stdout, stderr) = Recalibrate(PimaModel, Rows("pima-logit"), output, "--new-version", "r-logit.2", "--kind", "intercept-and-slope");
        Assert.True(exit == 0, stderr);
        Assert.Contains($"wrote {output}: pima r-logit.2, intercept-and-slope (--kind intercept-and-slope)", stdout, StringComparison.Ordinal);
        Assert.Equal(0, _cli.Run("check", output).Exit);

        var old = ModelFileReader.ReadValidFile(PimaModel);
        var recalibrated = ModelFileReader.ReadValidFile(output);
        // R: a, b = coef(glm(y ~ eta, binomial)) on Pima.te; every coefficient b·β_old, the intercept a + b·β₀_old.
        var r = R.Glm("pima-logit");
        Assert.Equal(old.Terms.Length, recalibrated.Terms.Length);
        for (var t = 0; t < old.Terms.Length; t++)
        {
            var expected = r["b"] * old.Terms[t].Coefficient + (old.Terms[t].IsIntercept ? r["a"] : 0.0);
            Near(expected, recalibrated.Terms[t].Coefficient, 1e-8, old.Terms[t].Name);
        }

        Assert.Equal("r-logit.2", recalibrated.Version);
        Assert.Equal("intercept-and-slope", recalibrated.Fit!.Value.GetProperty("kind").GetString());
        // The fit and the closed test are printed: R's logLik of glm(y ~ eta) is -146.22691806551612.
        Assert.Contains("intercept and slope           -146.227", stdout, StringComparison.Ordinal);
        Assert.Contains("recommendation: keep the model", stdout, StringComparison.Ordinal);
    }

    [Fact]
    public void In_the_large_moves_the_intercept_by_R_glm_offset_estimate()
    {
        var output = Path.Combine(_cli.Folder, "large.json");
        var (exit, _, stderr) = Recalibrate(PimaModel, Rows("pima-logit"), output, "--new-version", "r-logit.large", "--kind", "in-the-large");
        Assert.True(exit == 0, stderr);
        var old = ModelFileReader.ReadValidFile(PimaModel);
        var recalibrated = ModelFileReader.ReadValidFile(output);
        // R: a = coef(glm(y ~ 1 + offset(eta), binomial)).
        var r = R.Glm("pima-logit");
        Near(old.Terms[0].Coefficient + r["a1"], recalibrated.Terms[0].Coefficient, 1e-8, "intercept");
        Assert.Equal(old.Terms.Skip(1).Select(t => t.Coefficient), recalibrated.Terms.Skip(1).Select(t => t.Coefficient));
    }

    [Fact]
    public void Auto_keeps_a_calibrated_model_and_writes_nothing()
    {
        // R's LR test of glm(y ~ eta) against the deployed predictions on Pima.te: 0.349 on 2 df, p = 0.84.
        var output = Path.Combine(_cli.Folder, "auto.json");
        var (exit, stdout, stderr) = Recalibrate(PimaModel, Rows("pima-logit"), output, "--new-version", "r-logit.2");
        Assert.True(exit == 0, stderr);
        Assert.Contains("the closed test recommends keeping pima r-logit as it is; nothing written", stdout, StringComparison.Ordinal);
        Assert.Contains("intercept and slope vs keep", stdout, StringComparison.Ordinal);
        Assert.False(File.Exists(output));
    }

    [Fact]
    public void Auto_recalibrates_a_miscalibrated_model_to_the_same_model_as_the_calibrated_one()
    {
        // pima-miscalibrated's eta is qlogis(plogis(-0.4 + 1.6·eta)) of the pima-logit rows (make-cases.R): the model that
        // gives it has coefficients 1.6·β and intercept 1.6·β₀ − 0.4, and covariance 1.6²·V.
        var old = ModelFileReader.ReadValidFile(PimaModel);
        var miscalibrated = old with
        {
            Version = "r-logit.mis",
            Terms = [.. old.Terms.Select(t => t with { Coefficient = 1.6 * t.Coefficient - (t.IsIntercept ? 0.4 : 0.0) })],
            Covariance = [.. old.Covariance!.Value.Select(row => ImmutableArray.CreateRange(row.Select(v => 2.56 * v)))],
        };
        var model = Path.Combine(_cli.Folder, "mis.json");
        ModelFileWriter.WriteFile(miscalibrated, model);
        var output = Path.Combine(_cli.Folder, "fixed.json");
        var (exit, stdout, stderr) = Recalibrate(model, Rows("pima-miscalibrated"), output, "--new-version", "r-logit.fixed");
        Assert.True(exit == 0, stderr);
        Assert.Contains("recommendation: intercept-and-slope", stdout, StringComparison.Ordinal);
        Assert.Contains("(the closed test's recommendation)", stdout, StringComparison.Ordinal);

        // R: glm(y ~ eta, binomial) on the miscalibrated rows; the coefficients are b·β' (+ a on the intercept).
        var r = R.Glm("pima-miscalibrated");
        var recalibrated = ModelFileReader.ReadValidFile(output);
        for (var t = 0; t < old.Terms.Length; t++)
        {
            var expected = r["b"] * miscalibrated.Terms[t].Coefficient + (old.Terms[t].IsIntercept ? r["a"] : 0.0);
            Near(expected, recalibrated.Terms[t].Coefficient, 1e-8, old.Terms[t].Name);
        }

        // The recalibration undoes the miscalibration: the same model as recalibrating the calibrated one (R's a, b on
        // pima-logit), to the rounding of the rows' eta.
        var rCalibrated = R.Glm("pima-logit");
        for (var t = 0; t < old.Terms.Length; t++)
        {
            var expected = rCalibrated["b"] * old.Terms[t].Coefficient + (old.Terms[t].IsIntercept ? rCalibrated["a"] : 0.0);
            Near(expected, recalibrated.Terms[t].Coefficient, 1e-9, $"{old.Terms[t].Name} against the calibrated model's recalibration");
        }
    }

    [Fact]
    public void In_the_large_still_works_when_a_constant_eta_leaves_no_slope_to_test()
    {
        // Pima.te's outcomes against eta = -1 for every row: the slope is not estimable, and in the large has the closed
        // form a = logit(109/332) + 1 (the mean of the outcomes).
        var lines = File.ReadAllLines(Rows("pima-logit"));
        var text = string.Join("\n", lines.Select((l, i) => i == 0 ? l : string.Join(",", l.Split(',').Select((c, k) => k == 2 ? "-1" : c))));
        var input = _cli.Write("constant.csv", text + "\n");
        var output = Path.Combine(_cli.Folder, "constant.json");
        var (exit, stdout, stderr) = Recalibrate(PimaModel, input, output, "--new-version", "r-logit.c", "--kind", "in-the-large");
        Assert.True(exit == 0, stderr);
        Assert.Contains("no closed test: every eta is equal", stdout, StringComparison.Ordinal);
        var old = ModelFileReader.ReadValidFile(PimaModel);
        var a = Math.Log(109.0 / 223.0) + 1.0;
        Near(old.Terms[0].Coefficient + a, ModelFileReader.ReadValidFile(output).Terms[0].Coefficient, 1e-12, "intercept");

        var (exitAuto, _, stderrAuto) = Recalibrate(PimaModel, input, output + ".auto", "--new-version", "r-logit.c");
        Assert.Equal(1, exitAuto);
        Assert.Contains("every eta is equal: the slope cannot be estimated", stderrAuto, StringComparison.Ordinal);
    }

    [Fact]
    public void An_unknown_column_is_a_usage_error_naming_it_and_listing_the_header()
    {
        var (exit, _, stderr) = _cli.Run("recalibrate", PimaModel, "--input", Rows("pima-logit"), "--eta", "linear_predictor", "--outcome", "y",
            "--new-version", "r-logit.2", "--output", Path.Combine(_cli.Folder, "x.json"));
        Assert.Equal(2, exit);
        Assert.Contains("--eta:", stderr, StringComparison.Ordinal);
        Assert.Contains("has no column 'linear_predictor'; its columns are p, y, eta", stderr, StringComparison.Ordinal);
    }

    [Fact]
    public void The_old_version_as_the_new_one_is_a_usage_error()
    {
        var output = Path.Combine(_cli.Folder, "same.json");
        var (exit, _, stderr) = Recalibrate(PimaModel, Rows("pima-logit"), output, "--new-version", "r-logit", "--kind", "in-the-large");
        Assert.Equal(2, exit);
        Assert.Contains("--new-version: 'r-logit' is the version of", stderr, StringComparison.Ordinal);
        Assert.Contains("needs a version of its own", stderr, StringComparison.Ordinal);
        Assert.False(File.Exists(output));
    }

    [Fact]
    public void A_model_without_an_intercept_is_refused_as_a_data_error()
    {
        var old = ModelFileReader.ReadValidFile(PimaModel);
        var noIntercept = old with
        {
            Terms = old.Terms.RemoveAt(0),
            Covariance = [.. old.Covariance!.Value.Skip(1).Select(row => row.RemoveAt(0))],
        };
        var model = Path.Combine(_cli.Folder, "no-intercept.json");
        ModelFileWriter.WriteFile(noIntercept, model);
        var (exit, _, stderr) = Recalibrate(model, Rows("pima-logit"), Path.Combine(_cli.Folder, "x.json"), "--new-version", "r-logit.2", "--kind", "in-the-large");
        Assert.Equal(1, exit);
        Assert.Contains("has no intercept term (a term with no factors)", stderr, StringComparison.Ordinal);
    }

    [Fact]
    public void An_invalid_model_file_is_a_data_error_listing_its_problems()
    {
        var text = File.ReadAllText(PimaModel).Replace("\"link\": \"logit\"", "\"link\": \"logistic\"", StringComparison.Ordinal);
        var (exit, _, stderr) = Recalibrate(_cli.Write("bad.json", text), Rows("pima-logit"), Path.Combine(_cli.Folder, "x.json"), "--new-version", "2");
        Assert.Equal(1, exit);
        Assert.Contains("is not a valid model file", stderr, StringComparison.Ordinal);
        Assert.Contains("$.link", stderr, StringComparison.Ordinal);
    }

    [Theory]
    [InlineData("--kind", "slope-only", "--kind: 'slope-only' is not auto, in-the-large or intercept-and-slope")]
    [InlineData("--alpha", "5", "--alpha: the significance level must lie strictly between 0 and 1, got 5")]
    [InlineData("--new-version", "two words", "--new-version: 'two words' is not a version")]
    public void A_bad_option_is_a_usage_error_naming_it(string option, string value, string message)
    {
        string[] args = ["recalibrate", PimaModel, "--input", Rows("pima-logit"), "--eta", "eta", "--outcome", "y", "--output", Path.Combine(_cli.Folder, "x.json")];
        if (option != "--new-version")
        {
            args = [.. args, "--new-version", "r-logit.2"];
        }

        var (exit, _, stderr) = _cli.Run([.. args, option, value]);
        Assert.Equal(2, exit);
        Assert.Contains(message, stderr, StringComparison.Ordinal);
    }

    [Fact]
    public void Missing_required_options_are_named_together()
    {
        var (exit, _, stderr) = _cli.Run("recalibrate", PimaModel, "--input", Rows("pima-logit"), "--eta", "eta");
        Assert.Equal(2, exit);
        Assert.Contains("--outcome is required", stderr, StringComparison.Ordinal);
        Assert.Contains("--new-version is required", stderr, StringComparison.Ordinal);
        Assert.Contains("--output is required", stderr, StringComparison.Ordinal);
    }

    /// <summary>R's glm on a reference case, run at test time (<c>/usr/bin/Rscript</c>).</summary>
    private static class R
    {
        private const string Rscript = "/usr/bin/Rscript";

        /// <summary>
        /// a, b = coef(glm(y ~ eta, binomial)) and a1 = coef(glm(y ~ 1 + offset(eta), binomial)) on CASE.csv, printed with 17
        /// significant digits.
        /// </summary>
        public static Dictionary<string, double> Glm(string caseName)
        {
            if (!File.Exists(Rscript))
            {
                Assert.Fail($"{Rscript} is missing: these tests compute their reference values with R. Install it with " +
                    "'apt-get install r-base-core r-cran-mass' (Debian/Ubuntu).");
            }

            var path = TestRepository.CalibrationFile(caseName + ".csv").Replace("\\", "\\\\", StringComparison.Ordinal).Replace("\"", "\\\"", StringComparison.Ordinal);
            var script = $$"""
                d <- read.csv("{{path}}")
                ctl <- glm.control(epsilon = 1e-14, maxit = 100)
                m2 <- glm(y ~ eta, binomial, data = d, control = ctl)
                m1 <- glm(y ~ 1 + offset(eta), binomial, data = d, control = ctl)
                v <- c(a = coef(m2)[[1]], b = coef(m2)[[2]], a1 = coef(m1)[[1]])
                cat(sprintf("%s %.17g\n", names(v), v), sep = "")
                """;
            var start = new ProcessStartInfo(Rscript) { RedirectStandardOutput = true, RedirectStandardError = true, UseShellExecute = false };
            start.ArgumentList.Add("--vanilla");
            start.ArgumentList.Add("-e");
            start.ArgumentList.Add(script);
            using var process = Process.Start(start)!;
            var stderr = process.StandardError.ReadToEndAsync();
            var stdout = process.StandardOutput.ReadToEnd();
            Assert.True(process.WaitForExit(60_000), "Rscript did not finish within 60 s");
            Assert.True(process.ExitCode == 0, $"Rscript failed: {stderr.Result}");
            return stdout.Split('\n', StringSplitOptions.RemoveEmptyEntries)
                .Select(l => l.Split(' ', 2))
                .ToDictionary(p => p[0], p => double.Parse(p[1], NumberStyles.Float, CultureInfo.InvariantCulture), StringComparer.Ordinal);
        }
    }
}
