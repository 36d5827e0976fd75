using System.Globalization;
using Scorer.ModelFile;
using Scorer.Statistics;

namespace Scorer.Statistics.Recalibration;

/// <summary>
/// Logistic recalibration of a deployed binary GLM on matured outcomes (Steyerberg et al. 2004, "Validation and updating
/// of predictive logistic regression models", Stat Med 23:2567; Vergouwe et al. 2017, Stat Med 36:4529): a binomial
/// GLM with the model's own link and the deployed linear predictor η_old as its one covariate (or as an offset, in the
/// large), the closed test that chooses between keeping the model and the two recalibrations, and the new model file.
/// </summary>
public static partial class Recalibrator
{
    private const int MaxIterations = 200;
    private const int MaxHalvings = 60;
    private const double StepTolerance = 1e-12;

    /// <summary>
    /// Fits g(P(y = 1)) = a + b·η_old by maximum likelihood with <paramref name="link"/> (b fixed at 1 for
    /// <see cref="RecalibrationKind.InTheLarge"/>): Newton–Raphson on the exact log-likelihood with step halving, until
    /// no parameter moves by more than 1e-12 relative to max(|θ|, 1). The standard errors and Cov(a, b) are those of the
    /// inverse Fisher information at the estimate (R's <c>vcov</c> of the same <c>glm</c>).
    /// </summary>
    /// <param name="eta">The linear predictor the deployed model gave each row (finite).</param>
    /// <param name="outcome">The matured outcome of each row, 0 or 1.</param>
    /// <param name="link">The deployed model's link.</param>
    /// <param name="kind">In the large, or intercept and slope.</param>
    /// <exception cref="ArgumentException">
    /// Lengths differ; an η is not finite; an outcome is not 0 or 1; there are no rows, no events or no non-events; for
    /// the slope, every η is equal or η separates the outcomes (the estimate does not exist).
    /// </exception>
    /// <exception cref="InvalidOperationException">The iteration did not converge.</exception>
    public static RecalibrationFit Fit(ReadOnlySpan<double> eta, ReadOnlySpan<byte> outcome, LinkKind link, RecalibrationKind kind)
    {
        CheckInputs(eta, outcome, link, kind);
        var n = eta.Length;
        var events = Events(outcome);
        if (kind == RecalibrationKind.InterceptAndSlope)
        {
            CheckSlopeEstimable(eta, outcome);
        }

        var slopeFitted = kind == RecalibrationKind.InterceptAndSlope;
        double a = 0.0, b = 1.0;
        var at = Evaluate(eta, outcome, link, a, b);
        if (!double.IsFinite(at.LogLikelihood))
        {
            // η_old gives some outcome probability 0. With the slope free, start from the constant model g(ȳ) (always
            // finite); in the large, from the root of the score in a, found by bisection.
            (a, b) = slopeFitted ? (Scorer.Engine.Links.Link.Forward(link, (double)events / n), 0.0) : (StartInTheLarge(eta, outcome, link), 1.0);

            at = Evaluate(eta, outcome, link, a, b);
        }

        for (var iteration = 1; iteration <= MaxIterations; iteration++)
        {
            var (stepA, stepB) = NewtonStep(at, slopeFitted);
            if (!double.IsFinite(stepA) || !double.IsFinite(stepB))
            {
                throw new InvalidOperationException(
                    $"the recalibration fit broke down at iteration {iteration} (a = {Text(a)}, b = {Text(b)}): the information matrix is singular");
            }

            if (Math.Abs(stepA) <= StepTolerance * Math.Max(1.0, Math.Abs(a)) &&
                Math.Abs(stepB) <= StepTolerance * Math.Max(1.0, Math.Abs(b)))
            {
                a += stepA;
                b += stepB;
                at = Evaluate(eta, outcome, link, a, b);
                return Finish(kind, link, a, b, at, n, events, iteration);
            }

            var accepted = false;
            for (var halving = 0; halving <= MaxHalvings && !accepted; halving++)
            {
                var next = Evaluate(eta, outcome, link, a + stepA, b + stepB);
                if (next.LogLikelihood >= at.LogLikelihood - Slack(at.LogLikelihood))
                {
                    a += stepA;
                    b += stepB;
                    at = next;
                    accepted = true;
                }
                else
                {
                    stepA *= 0.5;
                    stepB *= 0.5;
                }
            }

            if (!accepted)
            {
                throw new InvalidOperationException(
                    $"the recalibration fit stalled at iteration {iteration} (a = {Text(a)}, b = {Text(b)}): no step along Newton's direction raises the log-likelihood");
            }
        }

        throw new InvalidOperationException(
            $"the recalibration fit did not converge in {MaxIterations} iterations (a = {Text(a)}, b = {Text(b)}); the outcomes may be nearly separated by eta");
    }

    /// <summary>
    /// Fits both recalibrations and runs the closed test of <see cref="RecalibrationChoice"/> at level
    /// <paramref name="alpha"/>.
    /// </summary>
    /// <exception cref="ArgumentException">As for <see cref="Fit"/>.</exception>
    /// <exception cref="ArgumentOutOfRangeException"><paramref name="alpha"/> is not strictly between 0 and 1.</exception>
    /// <exception cref="InvalidOperationException">A fit did not converge.</exception>
    public static RecalibrationChoice Choose(ReadOnlySpan<double> eta, ReadOnlySpan<byte> outcome, LinkKind link, double alpha = 0.05)
    {
        if (!(alpha > 0.0 && alpha < 1.0))
        {
            throw new ArgumentOutOfRangeException(nameof(alpha), alpha, "The significance level alpha lies strictly between 0 and 1.");
        }

        var inTheLarge = Fit(eta, outcome, link, RecalibrationKind.InTheLarge);
        var slope = Fit(eta, outcome, link, RecalibrationKind.InterceptAndSlope);
        var keep = KeepLogLikelihood(eta, outcome, link);

        var largeVsKeep = Test(inTheLarge.LogLikelihood, keep, 1);
        var slopeVsLarge = Test(slope.LogLikelihood, inTheLarge.LogLikelihood, 1);
        var slopeVsKeep = Test(slope.LogLikelihood, keep, 2);

        RecalibrationKind? recommended;
        string reason;
        var level = alpha.ToString("G4", CultureInfo.InvariantCulture);
        if (!(slopeVsKeep.P < alpha))
        {
            recommended = null;
            reason = $"intercept-and-slope against keep: LR {Text(slopeVsKeep.Statistic)} on 2 df, p {Text(slopeVsKeep.P)} >= {level}: " +
                "no evidence that the deployed model is miscalibrated; keep it";
        }
        else if (slopeVsLarge.P < alpha)
        {
            recommended = RecalibrationKind.InterceptAndSlope;
            reason = $"intercept-and-slope against keep: p {Text(slopeVsKeep.P)} < {level}; against in the large: LR " +
                $"{Text(slopeVsLarge.Statistic)} on 1 df, p {Text(slopeVsLarge.P)} < {level}: the slope needs re-estimating too";
        }
        else
        {
            recommended = RecalibrationKind.InTheLarge;
            reason = $"intercept-and-slope against keep: p {Text(slopeVsKeep.P)} < {level}; against in the large: LR " +
                $"{Text(slopeVsLarge.Statistic)} on 1 df, p {Text(slopeVsLarge.P)} >= {level}: re-estimating the intercept is enough";
        }

        return new RecalibrationChoice(keep, inTheLarge, slope, largeVsKeep, slopeVsLarge, slopeVsKeep, alpha, recommended, reason);
    }

    /// <summary>
    /// The log-likelihood of the deployed model's predictions g⁻¹(η_old) on the outcomes (a = 0, b = 1); −∞ when a row's
    /// outcome has probability 0 under them.
    /// </summary>
    public static double KeepLogLikelihood(ReadOnlySpan<double> eta, ReadOnlySpan<byte> outcome, LinkKind link)
    {
        CheckInputs(eta, outcome, link, RecalibrationKind.InTheLarge);
        var sum = 0.0;
        for (var i = 0; i < eta.Length; i++)
        {
            sum += BinaryLikelihood.LogLikelihood(link, eta[i], outcome[i] == 1);
        }

        return sum;
    }

    private static LikelihoodRatioTest Test(double larger, double smaller, int df)
    {
        var statistic = Math.Max(0.0, 2.0 * (larger - smaller));
        if (double.IsNegativeInfinity(smaller))
        {
            statistic = double.PositiveInfinity;
        }

        return new LikelihoodRatioTest(statistic, df, Tails.ChiSquaredUpper(statistic, df));
    }

    private static RecalibrationFit Finish(RecalibrationKind kind, LinkKind link, double a, double b, Point at, int n, int events, int iterations)
    {
        double seA, seB, cov;
        if (kind == RecalibrationKind.InterceptAndSlope)
        {
            var det = at.I00 * at.I11 - at.I01 * at.I01;
            if (!(det > 0) || !double.IsFinite(det))
            {
                throw new InvalidOperationException("the recalibration fit converged to a point where the information matrix is singular");
            }

            seA = Math.Sqrt(at.I11 / det);
            seB = Math.Sqrt(at.I00 / det);
            cov = -at.I01 / det;
        }
        else
        {
            seA = 1.0 / Math.Sqrt(at.I00);
            seB = 0.0;
            cov = 0.0;
            b = 1.0;
        }

        var nonEvents = n - events;
        var nullLogLikelihood = events * Math.Log((double)events / n) + nonEvents * Math.Log((double)nonEvents / n);
        return new RecalibrationFit(kind, link, a, b, seA, seB, cov, n, events, at.LogLikelihood, nullLogLikelihood, iterations);
    }

    /// <summary>The Newton step from the observed information; the Fisher step where that is not positive definite.</summary>
    private static (double A, double B) NewtonStep(Point at, bool slope)
    {
        if (!slope)
        {
            var h = -at.H00 > 0 ? -at.H00 : at.I00;
            return (at.G0 / h, 0.0);
        }

        double h00 = -at.H00, h01 = -at.H01, h11 = -at.H11;
        var det = h00 * h11 - h01 * h01;
        if (!(h00 > 0 && det > 1e-13 * h00 * h11))
        {
            (h00, h01, h11) = (at.I00, at.I01, at.I11);
            det = h00 * h11 - h01 * h01;
        }

        return ((h11 * at.G0 - h01 * at.G1) / det, (h00 * at.G1 - h01 * at.G0) / det);
    }

    /// <summary>A start for the fit in the large when a = 0 gives an outcome probability 0: the root of the score in a, roughly.</summary>
    private static double StartInTheLarge(ReadOnlySpan<double> eta, ReadOnlySpan<byte> outcome, LinkKind link)
    {
        // The score Σ dℓ/dη is decreasing in a (the log-likelihood is concave); find a bracket and bisect to a finite point.
        double lo = -1.0, hi = 1.0;
        while (Evaluate(eta, outcome, link, lo, 1.0).G0 < 0 && lo > -1e6)
        {
            lo *= 2;
        }

        while (Evaluate(eta, outcome, link, hi, 1.0).G0 > 0 && hi < 1e6)
        {
            hi *= 2;
        }

        for (var k = 0; k < 200 && hi - lo > 1e-6 * Math.Max(1.0, Math.Abs(lo)); k++)
        {
            var mid = 0.5 * (lo + hi);
            if (Evaluate(eta, outcome, link, mid, 1.0).G0 > 0)
            {
                lo = mid;
            }
            else
            {
                hi = mid;
            }
        }

        return 0.5 * (lo + hi);
    }

    private static double Slack(double logLik) => 1e-12 * (1.0 + Math.Abs(logLik));

    /// <summary>One pass at η = a + b·η_old: log-likelihood, score (G0, G1), Hessian H and Fisher information I.</summary>
    private static Point Evaluate(ReadOnlySpan<double> x, ReadOnlySpan<byte> outcome, LinkKind link, double a, double b)
    {
        double logLik = 0.0, g0 = 0.0, g1 = 0.0, h00 = 0.0, h01 = 0.0, h11 = 0.0, i00 = 0.0, i01 = 0.0, i11 = 0.0;
        for (var i = 0; i < x.Length; i++)
        {
            var xi = x[i];
            var row = BinaryLikelihood.Evaluate(link, a + b * xi, outcome[i] == 1);
            logLik += row.LogLikelihood;
            g0 += row.Score;
            g1 += row.Score * xi;
            h00 += row.Curvature;
            h01 += row.Curvature * xi;
            h11 += row.Curvature * xi * xi;
            i00 += row.Weight;
            i01 += row.Weight * xi;
            i11 += row.Weight * xi * xi;
        }

        return new Point(logLik, g0, g1, h00, h01, h11, i00, i01, i11);
    }

    private static void CheckInputs(ReadOnlySpan<double> eta, ReadOnlySpan<byte> outcome, LinkKind link, RecalibrationKind kind)
    {
        if (eta.Length != outcome.Length)
        {
            throw new ArgumentException(
                string.Create(CultureInfo.InvariantCulture, $"outcome has {outcome.Length} values but eta has {eta.Length}; they must have the same length."),
                nameof(outcome));
        }

        if (!Enum.IsDefined(link))
        {
            throw new ArgumentOutOfRangeException(nameof(link), link, "The link is logit, probit or cloglog.");
        }

        if (!Enum.IsDefined(kind))
        {
            throw new ArgumentOutOfRangeException(nameof(kind), kind, "The kind is InTheLarge or InterceptAndSlope.");
        }

        for (var i = 0; i < eta.Length; i++)
        {
            if (!double.IsFinite(eta[i]))
            {
                throw new ArgumentException(
                    string.Create(CultureInfo.InvariantCulture, $"eta[{i}] = {eta[i]} is not a finite linear predictor."), nameof(eta));
            }

            if (outcome[i] > 1)
            {
                throw new ArgumentException(
                    string.Create(CultureInfo.InvariantCulture, $"outcome[{i}] = {outcome[i]}; an outcome is 0 or 1."), nameof(outcome));
            }
        }

        if (eta.Length == 0)
        {
            throw new ArgumentException("there are no rows: recalibration needs labelled rows.", nameof(eta));
        }

        var events = Events(outcome);
        if (events == 0 || events == eta.Length)
        {
            throw new ArgumentException(
                string.Create(CultureInfo.InvariantCulture,
                    $"all {eta.Length} outcomes are {(events == 0 ? 0 : 1)}: recalibration needs both events and non-events (the estimate does not exist otherwise)."),
                nameof(outcome));
        }
    }

    /// <summary>The slope's estimate exists only when η varies and does not separate the outcomes (Albert &amp; Anderson 1984).</summary>
    private static void CheckSlopeEstimable(ReadOnlySpan<double> eta, ReadOnlySpan<byte> outcome)
    {
        double min0 = double.PositiveInfinity, max0 = double.NegativeInfinity, min1 = double.PositiveInfinity, max1 = double.NegativeInfinity;
        for (var i = 0; i < eta.Length; i++)
        {
            if (outcome[i] == 1)
            {
                min1 = Math.Min(min1, eta[i]);
                max1 = Math.Max(max1, eta[i]);
            }
            else
            {
                min0 = Math.Min(min0, eta[i]);
                max0 = Math.Max(max0, eta[i]);
            }
        }

        if (Math.Min(min0, min1) == Math.Max(max0, max1))
        {
            throw new ArgumentException("every eta is equal: the slope cannot be estimated (use in-the-large recalibration).", nameof(eta));
        }

        if (max0 <= min1 || max1 <= min0)
        {
            var direction = max0 <= min1 ? "every event has an eta at or above every non-event's" : "every event has an eta at or below every non-event's";
            throw new ArgumentException(
                $"eta separates the outcomes ({direction}): the slope's maximum-likelihood estimate does not exist (it is infinite).",
                nameof(eta));
        }
    }

    private static int Events(ReadOnlySpan<byte> outcome)
    {
        var events = 0;
        foreach (var y in outcome)
        {
            events += y;
        }

        return events;
    }

    private static string Text(double x) => x.ToString("G6", CultureInfo.InvariantCulture);

    private readonly record struct Point(
        double LogLikelihood, double G0, double G1, double H00, double H01, double H11, double I00, double I01, double I11);
}
