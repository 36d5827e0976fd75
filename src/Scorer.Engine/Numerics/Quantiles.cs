using MathNet.Numerics.Distributions;

namespace Scorer.Engine.Numerics;

/// <summary>Quantiles used for bands and tests, from MathNet.Numerics.</summary>
public static class Quantiles
{
    /// <summary>Φ⁻¹(p), the standard normal quantile.</summary>
    public static double Normal(double p)
    {
        ArgumentOutOfRangeException.ThrowIfLessThanOrEqual(p, 0.0);
        ArgumentOutOfRangeException.ThrowIfGreaterThanOrEqual(p, 1.0);
        return MathNet.Numerics.Distributions.Normal.InvCDF(0.0, 1.0, p);
    }

    /// <summary>The two-sided critical value z = Φ⁻¹(1 − α/2) of a confidence level 1 − α.</summary>
    public static double TwoSidedZ(double level)
    {
        if (!(level > 0 && level < 1))
        {
            throw new ArgumentOutOfRangeException(nameof(level), level, "A confidence level lies strictly between 0 and 1.");
        }

        // 1 - α/2 = (1 + level)/2, formed without cancellation.
        return -MathNet.Numerics.Distributions.Normal.InvCDF(0.0, 1.0, 0.5 * (1.0 - level));
    }

    /// <summary>The p quantile of the chi-squared distribution with <paramref name="df"/> degrees of freedom.</summary>
    public static double ChiSquared(double p, double df) => MathNet.Numerics.Distributions.ChiSquared.InvCDF(df, p);

    /// <summary>Upper-tail probability of the chi-squared distribution.</summary>
    public static double ChiSquaredUpperTail(double x, double df) => 1.0 - MathNet.Numerics.Distributions.ChiSquared.CDF(df, x);
}
