using System.Runtime.InteropServices;
using System.Runtime.Intrinsics;
using Scorer.Engine.Numerics;

namespace Scorer.Statistics;

/// <summary>
/// The two small logistic regressions of the calibration intercept and slope, fitted by Newton–Raphson on the exact
/// log-likelihood (score and information of the canonical logit link), with step halving when a step lowers the
/// log-likelihood. Every quantity is formed stably from e^−|η| (see Evaluate). Each iteration is one pass over the
/// rows: the point a step lands on supplies the next score and information.
/// </summary>
internal static class LogisticFit
{
    /// <summary>
    /// logit(p) is taken of p clamped to [2⁻⁵³, 1 − 2⁻⁵³], so p = 0 and p = 1 give ∓36.7 instead of ∓∞. 1 − 2⁻⁵³ is the
    /// largest double below 1, so the clamp changes no p &lt; 1 at the top (pima-cloglog's p = 1 − 2⁻⁵² keeps its
    /// logit 36.04, as in R); at the bottom it raises only p &lt; 1.1e-16.
    /// </summary>
    public const double LogitClamp = 1.0 / 9007199254740992.0;

    private const int MaxIterations = 100;
    private const int MaxHalvings = 60;
    private const double StepTolerance = 1e-12;

    /// <summary>Rows summed in vector lanes before their sums join the totals (see Evaluate).</summary>
    private const int BlockRows = 4096;

    /// <summary>logit(p) = ln p − ln(1 − p), with ln(1 − p) by log1p and p clamped as <see cref="LogitClamp"/> says.</summary>
    public static double Logit(double p)
    {
        p = Math.Clamp(p, LogitClamp, 1.0 - LogitClamp);
        return Math.Log(p) - Elementary.Log1P(-p);
    }

    /// <summary>
    /// Fits logit P(y = 1) = a + offset. Returns false when the estimate does not exist or the iteration fails (no
    /// events, no non-events, non-convergence).
    /// </summary>
    public static bool TryFitIntercept(ReadOnlySpan<double> offset, ReadOnlySpan<double> outcome, out double estimate, out double se)
    {
        estimate = double.NaN;
        se = double.NaN;
        var a = 0.0;
        var at = Evaluate(offset, outcome, a, 1.0);
        for (var iteration = 0; iteration < MaxIterations; iteration++)
        {
            if (!(at.H00 > 0) || !double.IsFinite(at.G0))
            {
                return false;
            }

            var step = at.G0 / at.H00;
            if (Math.Abs(step) <= StepTolerance * Math.Max(1.0, Math.Abs(a)))
            {
                a += step;
                at = Evaluate(offset, outcome, a, 1.0);
                estimate = a;
                se = 1.0 / Math.Sqrt(at.H00);
                return double.IsFinite(se);
            }

            var accepted = false;
            for (var halving = 0; halving <= MaxHalvings && !accepted; halving++)
            {
                var next = Evaluate(offset, outcome, a + step, 1.0);
                if (next.LogLikelihood >= at.LogLikelihood - Slack(at.LogLikelihood))
                {
                    a += step;
                    at = next;
                    accepted = true;
                }
                else
                {
                    step *= 0.5;
                }
            }

            if (!accepted)
            {
                return false;
            }
        }

        return false;
    }

    /// <summary>
    /// Fits logit P(y = 1) = c + b·x. Returns false when the estimate does not exist or the iteration fails (no events,
    /// no non-events, x constant, separation, non-convergence). se0/se1 are the standard errors of c and b.
    /// </summary>
    public static bool TryFitLine(
        ReadOnlySpan<double> x, ReadOnlySpan<double> outcome, out double intercept, out double slope, out double se0, out double se1)
    {
        intercept = slope = se0 = se1 = double.NaN;
        double c = 0.0, b = 1.0;
        var at = Evaluate(x, outcome, c, b);
        for (var iteration = 0; iteration < MaxIterations; iteration++)
        {
            var det = at.H00 * at.H11 - at.H01 * at.H01;
            if (!(det > 1e-13 * at.H00 * at.H11) || !double.IsFinite(det) || !double.IsFinite(at.G0) || !double.IsFinite(at.G1))
            {
                return false;
            }

            var step0 = (at.H11 * at.G0 - at.H01 * at.G1) / det;
            var step1 = (at.H00 * at.G1 - at.H01 * at.G0) / det;
            if (Math.Abs(step0) <= StepTolerance * Math.Max(1.0, Math.Abs(c)) &&
                Math.Abs(step1) <= StepTolerance * Math.Max(1.0, Math.Abs(b)))
            {
                c += step0;
                b += step1;
                at = Evaluate(x, outcome, c, b);
                det = at.H00 * at.H11 - at.H01 * at.H01;
                intercept = c;
                slope = b;
                se0 = Math.Sqrt(at.H11 / det);
                se1 = Math.Sqrt(at.H00 / det);
                return det > 0 && double.IsFinite(se0) && double.IsFinite(se1);
            }

            var accepted = false;
            for (var halving = 0; halving <= MaxHalvings && !accepted; halving++)
            {
                var next = Evaluate(x, outcome, c + step0, b + step1);
                if (next.LogLikelihood >= at.LogLikelihood - Slack(at.LogLikelihood))
                {
                    c += step0;
                    b += step1;
                    at = next;
                    accepted = true;
                }
                else
                {
                    step0 *= 0.5;
                    step1 *= 0.5;
                }
            }

            if (!accepted)
            {
                return false;
            }
        }

        return false;
    }

    /// <summary>Rounding allowance when comparing log-likelihoods: a step may lose this much and still be taken.</summary>
    private static double Slack(double logLik) => 1e-12 * (1.0 + Math.Abs(logLik));

    /// <summary>
    /// One pass at η = c + b·x: the log-likelihood Σ y η − ln(1 + e^η), the score (G0, G1) = Σ (y − μ)(1, x) and the
    /// information H = Σ μ(1 − μ)(1, x)(1, x)ᵀ. With e = e^−|η| (one exponential per row): ln(1 + e^η) = max(η, 0) +
    /// log1p(e); μ and 1 − μ are 1/(1 + e) and e/(1 + e) in the order the sign of η gives; y − μ is formed as 1 − μ
    /// for y = 1, and the log-likelihood term as −(max(∓η, 0) + log1p(e)), so nothing cancels where μ is close to y.
    /// Four rows at a time where the machine has 256-bit vectors (the runtime's vector exp and log, within an ulp or
    /// two of the scalar ones; log1p by the same correction as <see cref="Elementary.Log1P"/>), the rest one by one.
    /// </summary>
    private static Point Evaluate(ReadOnlySpan<double> x, ReadOnlySpan<double> outcome, double c, double b)
    {
        double logLik = 0.0, g0 = 0.0, g1 = 0.0, h00 = 0.0, h01 = 0.0, h11 = 0.0;
        var i = 0;
        if (Vector256.IsHardwareAccelerated && x.Length >= Vector256<double>.Count)
        {
            var one = Vector256<double>.One;
            var zero = Vector256<double>.Zero;
            var cv = Vector256.Create(c);
            var bv = Vector256.Create(b);
            ref var xr = ref MemoryMarshal.GetReference(x);
            ref var yr = ref MemoryMarshal.GetReference(outcome);
            // Blocks of BlockRows rows summed in vector lanes, then the blocks' sums added up: the rounding error grows
            // with the block length plus the number of blocks, not with n (a plain running sum over millions of rows in
            // ascending order of p, many of them tied, drifts by enough to keep Newton's steps from ever settling).
            while (i <= x.Length - Vector256<double>.Count)
            {
                var blockEnd = Math.Min(x.Length - Vector256<double>.Count, i + BlockRows);
                Vector256<double> vl = zero, vg0 = zero, vg1 = zero, vh00 = zero, vh01 = zero, vh11 = zero;
                for (; i <= blockEnd; i += Vector256<double>.Count)
                {
                    var xi = Vector256.LoadUnsafe(ref xr, (nuint)i);
                    var yi = Vector256.LoadUnsafe(ref yr, (nuint)i);
                    var eta = Vector256.FusedMultiplyAdd(bv, xi, cv);
                    var e = Vector256.Exp(-Vector256.Abs(eta));
                    var large = one / (one + e);
                    var small = e * large;
                    var u = one + e;
                    var log1pE = Vector256.ConditionalSelect(Vector256.Equals(u, one), e, Vector256.Log(u) * e / (u - one));
                    var positive = Vector256.GreaterThanOrEqual(eta, zero);
                    var mu = Vector256.ConditionalSelect(positive, large, small);
                    var complement = Vector256.ConditionalSelect(positive, small, large);
                    var isEvent = Vector256.Equals(yi, one);
                    vl -= Vector256.Max(Vector256.ConditionalSelect(isEvent, -eta, eta), zero) + log1pE;
                    var residual = Vector256.ConditionalSelect(isEvent, complement, -mu);
                    var w = mu * complement;
                    vg0 += residual;
                    vg1 += residual * xi;
                    vh00 += w;
                    vh01 += w * xi;
                    vh11 += w * xi * xi;
                }

                logLik += Vector256.Sum(vl);
                g0 += Vector256.Sum(vg0);
                g1 += Vector256.Sum(vg1);
                h00 += Vector256.Sum(vh00);
                h01 += Vector256.Sum(vh01);
                h11 += Vector256.Sum(vh11);
            }
        }

        for (; i < x.Length; i++)
        {
            var xi = x[i];
            var eta = c + b * xi;
            var e = Math.Exp(-Math.Abs(eta));
            var large = 1.0 / (1.0 + e);
            var small = e * large;
            var log1pE = Elementary.Log1P(e);
            double mu, complement;
            if (eta >= 0)
            {
                mu = large;
                complement = small;
            }
            else
            {
                mu = small;
                complement = large;
            }

            double residual;
            if (outcome[i] == 1.0)
            {
                logLik -= Math.Max(-eta, 0.0) + log1pE;
                residual = complement;
            }
            else
            {
                logLik -= Math.Max(eta, 0.0) + log1pE;
                residual = -mu;
            }

            var w = mu * complement;
            g0 += residual;
            g1 += residual * xi;
            h00 += w;
            h01 += w * xi;
            h11 += w * xi * xi;
        }

        return new Point(logLik, g0, g1, h00, h01, h11);
    }

    private readonly record struct Point(double LogLikelihood, double G0, double G1, double H00, double H01, double H11);
}
