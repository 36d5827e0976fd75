using Scorer.Engine.Links;
using Scorer.Engine.Numerics;
using Scorer.ModelFile;

namespace Scorer.Statistics.Recalibration;

/// <summary>
/// One row's part of a binary GLM log-likelihood as a function of its linear predictor η, for the three links: the
/// log-likelihood ℓ = y ln μ + (1 − y) ln(1 − μ), the score dℓ/dη, the curvature d²ℓ/dη² (for Newton's method) and the
/// Fisher weight μ′²/(μ(1 − μ)) (for the covariance). Everything is formed from the two hazards r₁ = μ′/μ and
/// r₀ = μ′/(1 − μ) and from h = μ″/μ′, so no quantity is a difference of nearly equal numbers:
/// dℓ/dη = r₁ (y = 1) or −r₀ (y = 0); d²ℓ/dη² = r₁(h − r₁) or −r₀(h + r₀); the weight is r₁·r₀.
/// logit: r₁ = 1 − μ, r₀ = μ, h = 1 − 2μ. probit: r₁ = φ(η)/Φ(η), r₀ = φ(η)/Φ(−η), h = −η. cloglog (u = e^η):
/// r₁ = u/expm1(u), r₀ = u, h = 1 − u, ln(1 − μ) = −u.
/// </summary>
internal static class BinaryLikelihood
{
    private const double LogSqrt2Pi = 0.91893853320467274178032973640562;
    private const double InvSqrt2Pi = 0.39894228040143267793994605993438;

    /// <summary>Beyond this |x| on the lower side, Φ(x) and φ(x)/Φ(x) come from the continued fraction of the Mills ratio.</summary>
    private const double MillsFrom = 30.0;

    public readonly record struct Row(double LogLikelihood, double Score, double Curvature, double Weight);

    public static Row Evaluate(LinkKind link, double eta, bool outcome) => link switch
    {
        LinkKind.Logit => Logit(eta, outcome),
        LinkKind.Probit => Probit(eta, outcome),
        LinkKind.CLogLog => CLogLog(eta, outcome),
        _ => throw new ArgumentOutOfRangeException(nameof(link), link, "Unexpected link"),
    };

    /// <summary>The log-likelihood alone (the same value <see cref="Evaluate"/> gives).</summary>
    public static double LogLikelihood(LinkKind link, double eta, bool outcome) => Evaluate(link, eta, outcome).LogLikelihood;

    private static Row Logit(double eta, bool y)
    {
        // With e = e^−|η|: ln(1 + e^η) = max(η, 0) + log1p(e); μ and 1 − μ are 1/(1 + e) and e/(1 + e) by the sign of η.
        var e = Math.Exp(-Math.Abs(eta));
        var large = 1.0 / (1.0 + e);
        var small = e * large;
        var log1pE = Elementary.Log1P(e);
        var (mu, complement) = eta >= 0 ? (large, small) : (small, large);
        var weight = mu * complement;
        return y
            ? new Row(-(Math.Max(-eta, 0.0) + log1pE), complement, -weight, weight)
            : new Row(-(Math.Max(eta, 0.0) + log1pE), -mu, -weight, weight);
    }

    private static Row Probit(double eta, bool y)
    {
        var (logMu, r1) = LogCdfAndHazard(eta);
        var (logComplement, r0) = LogCdfAndHazard(-eta);
        var weight = r1 * r0;
        var h = -eta;
        return y
            ? new Row(logMu, r1, r1 * (h - r1), weight)
            : new Row(logComplement, -r0, -r0 * (h + r0), weight);
    }

    private static Row CLogLog(double eta, bool y)
    {
        var u = Math.Exp(eta);
        var r0 = u;
        double r1;
        if (double.IsPositiveInfinity(u))
        {
            r1 = 0.0;
        }
        else
        {
            var em1 = Elementary.ExpM1(u);
            r1 = double.IsPositiveInfinity(em1) ? 0.0 : u == 0.0 ? 1.0 : u / em1;
        }

        // r₁ = 0 only where μ′ underflows with u → ∞: the row then adds nothing to the score, curvature or weight.
        var weight = r1 == 0.0 ? 0.0 : r1 * r0;
        if (y)
        {
            // ln μ = ln(−expm1(−u)): exact for small u (μ ≈ u), and 0 once μ rounds to 1.
            var logMu = u == 0.0 ? eta : Math.Log(-Elementary.ExpM1(-u));
            return new Row(logMu, r1, r1 == 0.0 ? 0.0 : r1 * (1.0 - u - r1), weight);
        }

        // ln(1 − μ) = −u, so the score and the curvature are −u as well (−r₀(h + r₀) = −u(1 − u + u)).
        return new Row(-u, -u, -u, weight);
    }

    /// <summary>(ln Φ(x), φ(x)/Φ(x)), accurate over the whole line.</summary>
    private static (double LogCdf, double Hazard) LogCdfAndHazard(double x)
    {
        if (x >= -MillsFrom)
        {
            var density = InvSqrt2Pi * Math.Exp(-0.5 * x * x);
            if (x > 0)
            {
                var upper = Link.NormalCdf(-x);
                return (Elementary.Log1P(-upper), density / (1.0 - upper));
            }

            var cdf = Link.NormalCdf(x);
            return (Math.Log(cdf), density / cdf);
        }

        // Φ(x)/φ(x) = R(t), t = −x > 30, by Laplace's continued fraction R(t) = 1/(t + 1/(t + 2/(t + 3/(t + ...)))),
        // which at t > 30 is exact to rounding after a few terms; then ln Φ(x) = ln φ(x) + ln R(t) and φ/Φ = 1/R(t).
        var t = -x;
        var f = t;
        for (var k = 40; k >= 1; k--)
        {
            f = t + k / f;
        }

        // f = 1/R(t).
        return (-0.5 * x * x - LogSqrt2Pi - Math.Log(f), f);
    }
}
