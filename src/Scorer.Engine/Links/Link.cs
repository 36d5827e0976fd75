using System.Runtime.CompilerServices;
using MathNet.Numerics;
using Scorer.ModelFile;

namespace Scorer.Engine.Links;

/// <summary>
/// Inverse links and their derivatives for the three binary links, stable over the whole double range of the linear
/// predictor (no overflow, no NaN; probabilities underflow to 0 or round to 1 only where a double must).
/// </summary>
public static class Link
{
    private const double InvSqrt2 = 0.70710678118654752440084436210485;
    private const double InvSqrt2Pi = 0.39894228040143267793994605993438;

    /// <summary>μ = g⁻¹(η).</summary>
    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static double Inverse(LinkKind link, double eta) => link switch
    {
        LinkKind.Logit => Logistic(eta),
        LinkKind.Probit => NormalCdf(eta),
        _ => InverseCLogLog(eta),
    };

    /// <summary>dμ/dη at η.</summary>
    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static double Derivative(LinkKind link, double eta) => link switch
    {
        LinkKind.Logit => LogisticDerivative(eta),
        LinkKind.Probit => InvSqrt2Pi * Math.Exp(-0.5 * eta * eta),
        _ => CLogLogDerivative(eta),
    };

    /// <summary>g(μ): the linear predictor that gives probability μ.</summary>
    public static double Forward(LinkKind link, double mu) => link switch
    {
        LinkKind.Logit => Math.Log(mu / (1 - mu)),
        LinkKind.Probit => MathNet.Numerics.Distributions.Normal.InvCDF(0, 1, mu),
        _ => Math.Log(-Numerics.Elementary.Log1P(-mu)),
    };

    /// <summary>1 / (1 + e^-η), evaluated on the side where the exponential cannot overflow.</summary>
    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static double Logistic(double eta)
    {
        if (eta >= 0)
        {
            return 1.0 / (1.0 + Math.Exp(-eta));
        }

        var e = Math.Exp(eta);
        return e / (1.0 + e);
    }

    /// <summary>μ(1 − μ) for the logistic, as e^-|η| / (1 + e^-|η|)².</summary>
    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static double LogisticDerivative(double eta)
    {
        var e = Math.Exp(-Math.Abs(eta));
        var d = 1.0 + e;
        return e / (d * d);
    }

    /// <summary>Φ(η) = erfc(−η/√2)/2, accurate in relative terms far into the lower tail.</summary>
    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static double NormalCdf(double eta) => 0.5 * SpecialFunctions.Erfc(-eta * InvSqrt2);

    /// <summary>1 − exp(−e^η) as −expm1(−e^η), exact for small e^η.</summary>
    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static double InverseCLogLog(double eta) => -Numerics.Elementary.ExpM1(-Math.Exp(eta));

    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static double CLogLogDerivative(double eta)
    {
        var e = Math.Exp(eta);
        return double.IsPositiveInfinity(e) ? 0.0 : Math.Exp(eta - e);
    }

    /// <summary>1 − μ, computed without cancellation: 1/(1 + e^η), Φ(−η), exp(−e^η).</summary>
    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static double Complement(LinkKind link, double eta) => link switch
    {
        LinkKind.Logit => Logistic(-eta),
        LinkKind.Probit => NormalCdf(-eta),
        _ => Math.Exp(-Math.Exp(eta)),
    };

    /// <summary>ln μ, finite wherever μ &gt; 0 is representable in logarithm: −log1p(e^−η), ln Φ(η), ln(−expm1(−e^η)).</summary>
    public static double LogInverse(LinkKind link, double eta) => link switch
    {
        LinkKind.Logit => eta >= 0 ? -Numerics.Elementary.Log1P(Math.Exp(-eta)) : eta - Numerics.Elementary.Log1P(Math.Exp(eta)),
        LinkKind.Probit => Math.Log(NormalCdf(eta)),
        _ => Math.Log(InverseCLogLog(eta)),
    };

    /// <summary>ln(1 − μ): −log1p(e^η), ln Φ(−η), −e^η.</summary>
    public static double LogComplement(LinkKind link, double eta) => link switch
    {
        LinkKind.Logit => LogInverse(LinkKind.Logit, -eta),
        LinkKind.Probit => Math.Log(NormalCdf(-eta)),
        _ => -Math.Exp(eta),
    };
}
