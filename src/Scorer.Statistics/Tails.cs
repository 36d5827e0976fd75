using MathNet.Numerics;

namespace Scorer.Statistics;

/// <summary>Tail probabilities, computed directly in the tail so that small p-values keep their relative accuracy.</summary>
internal static class Tails
{
    private const double InvSqrt2 = 0.70710678118654752440;

    /// <summary>The two-sided standard normal p-value 2Φ(−|z|) = erfc(|z|/√2); NaN for NaN.</summary>
    public static double TwoSidedNormal(double z) =>
        double.IsNaN(z) ? double.NaN : SpecialFunctions.Erfc(Math.Abs(z) * InvSqrt2);

    /// <summary>The upper tail of χ²(df) at x, Q(df/2, x/2); 0 at +∞, NaN for NaN.</summary>
    public static double ChiSquaredUpper(double x, int df)
    {
        if (double.IsNaN(x))
        {
            return double.NaN;
        }

        if (double.IsPositiveInfinity(x))
        {
            return 0.0;
        }

        return x <= 0.0 ? 1.0 : SpecialFunctions.GammaUpperRegularized(0.5 * df, 0.5 * x);
    }

    /// <summary>
    /// z = estimate/se and its two-sided p-value, with the conventions of the paired comparisons: se = 0 gives z = 0,
    /// p = 1 when the estimate is 0 and z = ±∞, p = 0 otherwise; a NaN se gives NaN.
    /// </summary>
    public static (double Z, double P) Wald(double estimate, double se)
    {
        if (double.IsNaN(se) || double.IsNaN(estimate))
        {
            return (double.NaN, double.NaN);
        }

        if (se == 0.0)
        {
            return estimate == 0.0 ? (0.0, 1.0) : (estimate > 0 ? double.PositiveInfinity : double.NegativeInfinity, 0.0);
        }

        var z = estimate / se;
        return (z, TwoSidedNormal(z));
    }
}
