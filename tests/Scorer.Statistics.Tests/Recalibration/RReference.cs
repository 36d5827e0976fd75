using System.Diagnostics;
using System.Globalization;
using Scorer.ModelFile;
using Scorer.Testing;

namespace Scorer.Statistics.Tests.Recalibration;

/// <summary>
/// Reference values computed by R at test time: <c>/usr/bin/Rscript -e SCRIPT</c>, whose standard output is lines of
/// <c>name value</c> (values printed with 17 significant digits, so they read back as R's doubles). A missing Rscript
/// fails the test with the package to install; nothing is skipped.
/// </summary>
internal static class RReference
{
    public const string Rscript = "/usr/bin/Rscript";

    /// <summary>
    /// The R code that fits, on the rows of <c>tests/reference/calibration/out/CASE.csv</c> (columns p, y, eta; eta
    /// optionally replaced by <paramref name="etaExpression"/>), <c>glm(y ~ eta)</c> and <c>glm(y ~ 1 + offset(eta))</c>
    /// with <c>binomial(link)</c>, and prints their coefficients, <c>vcov</c>, <c>logLik</c>, the keep log-likelihood
    /// of g⁻¹(eta), the intercept-only log-likelihood, and the three likelihood-ratio statistics with their
    /// <c>pchisq</c> upper tails. glm runs 500 IRLS iterations (epsilon 1e-300: its deviance test is never met, so it
    /// stops at its fixed point rather than ~1e-8 from it; the non-convergence warning is suppressed).
    /// </summary>
    public static Dictionary<string, double> Recalibration(string caseName, LinkKind link, string etaExpression = "eta") =>
        Cache.GetOrAdd((caseName, link, etaExpression), key => new Lazy<Dictionary<string, double>>(() => RunRecalibration(key.Case, key.Link, key.Eta))).Value;

    private static readonly System.Collections.Concurrent.ConcurrentDictionary<(string Case, LinkKind Link, string Eta), Lazy<Dictionary<string, double>>> Cache = new();

    private static Dictionary<string, double> RunRecalibration(string caseName, LinkKind link, string etaExpression)
    {
        var linkName = ModelFileWriter.LinkName(link);
        var csv = RString(TestRepository.CalibrationFile(caseName + ".csv"));
        // The keep log-likelihood is Σ y ln μ + (1 − y) ln(1 − μ) from eta directly (plogis/pnorm with log.p, and
        // log(-expm1(-exp(eta))), -exp(eta) for cloglog): binomial()$linkinv clamps and rounds μ near 1.
        var script = $$"""
            d <- read.csv({{csv}}); d$eta <- with(d, {{etaExpression}})
            ctl <- glm.control(epsilon = 1e-300, maxit = 500)
            fam <- binomial(link = "{{linkName}}")
            m2 <- suppressWarnings(glm(y ~ eta, fam, data = d, control = ctl))
            m1 <- suppressWarnings(glm(y ~ 1 + offset(eta), fam, data = d, control = ctl))
            m0 <- suppressWarnings(glm(y ~ 1, fam, data = d, control = ctl))
            e <- d$eta; y <- d$y
            keep <- switch("{{linkName}}",
              logit = sum(ifelse(y == 1, plogis(e, log.p = TRUE), plogis(-e, log.p = TRUE))),
              probit = sum(ifelse(y == 1, pnorm(e, log.p = TRUE), pnorm(-e, log.p = TRUE))),
              cloglog = sum(ifelse(y == 1, log(-expm1(-exp(e))), -exp(e))))
            l2 <- as.numeric(logLik(m2)); l1 <- as.numeric(logLik(m1))
            v <- c(
              a = coef(m2)[[1]], b = coef(m2)[[2]], va = vcov(m2)[1, 1], vb = vcov(m2)[2, 2], cab = vcov(m2)[1, 2], ll2 = l2,
              a1 = coef(m1)[[1]], va1 = vcov(m1)[1, 1], ll1 = l1, keep = keep, null = as.numeric(logLik(m0)),
              n = nrow(d), events = sum(y),
              lr10 = 2 * (l1 - keep), p10 = pchisq(2 * (l1 - keep), 1, lower.tail = FALSE),
              lr21 = 2 * (l2 - l1), p21 = pchisq(2 * (l2 - l1), 1, lower.tail = FALSE),
              lr20 = 2 * (l2 - keep), p20 = pchisq(2 * (l2 - keep), 2, lower.tail = FALSE))
            cat(sprintf("%s %.17g\n", names(v), v), sep = "")
            """;
        return Run(script);
    }

    /// <summary>
    /// The score (∂ℓ/∂a, ∂ℓ/∂b) of the recalibration likelihood at (a, b), evaluated by R on the rows of CASE.csv with
    /// the hazards formed without cancellation: logit y − plogis(η); probit exp(dnorm(η, log) − pnorm(±η, log.p));
    /// cloglog u/expm1(u) and u = exp(η). At the maximum-likelihood estimate both are 0 up to rounding.
    /// </summary>
    public static (double A, double B) Score(string caseName, LinkKind link, double a, double b, string etaExpression = "eta")
    {
        var linkName = ModelFileWriter.LinkName(link);
        var csv = RString(TestRepository.CalibrationFile(caseName + ".csv"));
        var script = $$"""
            d <- read.csv({{csv}}); x <- with(d, {{etaExpression}}); y <- d$y
            e <- {{a.ToString("R", CultureInfo.InvariantCulture)}} + {{b.ToString("R", CultureInfo.InvariantCulture)}} * x
            s <- switch("{{linkName}}",
              logit = y - plogis(e),
              probit = ifelse(y == 1, exp(dnorm(e, log = TRUE) - pnorm(e, log.p = TRUE)), -exp(dnorm(e, log = TRUE) - pnorm(-e, log.p = TRUE))),
              cloglog = ifelse(y == 1, exp(e) / expm1(exp(e)), -exp(e)))
            v <- c(ua = sum(s), ub = sum(s * x))
            cat(sprintf("%s %.17g\n", names(v), v), sep = "")
            """;
        var values = Run(script);
        return (values["ua"], values["ub"]);
    }

    /// <summary>Runs an R script and reads its <c>name value</c> lines.</summary>
    public static Dictionary<string, double> Run(string script)
    {
        if (!File.Exists(Rscript))
        {
            Assert.Fail($"{Rscript} is missing: these tests compute their reference values with R. Install it with " +
                "'apt-get install r-base-core r-cran-mass' (Debian/Ubuntu).");
        }

        var start = new ProcessStartInfo(Rscript)
        {
            RedirectStandardOutput = true,
            RedirectStandardError = true,
            UseShellExecute = false,
        };
        start.ArgumentList.Add("--vanilla");
        start.ArgumentList.Add("-e");
        start.ArgumentList.Add(script);
        using var process = Process.Start(start) ?? throw new InvalidOperationException("Rscript did not start");
        var stderr = process.StandardError.ReadToEndAsync();
        var stdout = process.StandardOutput.ReadToEnd();
        if (!process.WaitForExit(60_000))
        {
            process.Kill();
            Assert.Fail("Rscript did not finish within 60 s");
        }

        Assert.True(process.ExitCode == 0, $"Rscript failed ({process.ExitCode}): {stderr.Result}\nscript:\n{script}");
        var values = new Dictionary<string, double>(StringComparer.Ordinal);
        foreach (var line in stdout.Split('\n', StringSplitOptions.RemoveEmptyEntries))
        {
            var parts = line.Split(' ', 2);
            values[parts[0]] = double.Parse(parts[1], NumberStyles.Float, CultureInfo.InvariantCulture);
        }

        return values;
    }

    /// <summary>An R string literal of a path.</summary>
    public static string RString(string text) => "\"" + text.Replace("\\", "\\\\", StringComparison.Ordinal).Replace("\"", "\\\"", StringComparison.Ordinal) + "\"";
}
