using Scorer.Engine.Numerics;
using Scorer.Engine.Tests.Support;

namespace Scorer.Engine.Tests;

public sealed class QuantileTests
{
    /// <summary>
    /// Normal percentage points as printed in Abramowitz &amp; Stegun (1964), Table 26.5 (values from memory, to the
    /// printed digits): z such that Q(z) = 1 − Φ(z) = q.
    /// </summary>
    [Theory]
    [InlineData(0.05, 1.644853627)]
    [InlineData(0.025, 1.959963985)]
    [InlineData(0.005, 2.575829304)]
    [InlineData(0.0005, 3.290526731)]
    public void Normal_quantiles_match_the_handbook_table(double q, double z)
    {
        Assert.Equal(z, Quantiles.Normal(1 - q), 9);
    }

    /// <summary>
    /// Chi-squared percentage points, Abramowitz &amp; Stegun (1964), Table 26.8 (values from memory, to the printed
    /// digits): x with P(χ²(ν) ≤ x) = p.
    /// </summary>
    [Theory]
    [InlineData(0.95, 1, 3.84146)]
    [InlineData(0.95, 2, 5.99146)]
    [InlineData(0.95, 10, 18.3070)]
    [InlineData(0.99, 1, 6.63490)]
    [InlineData(0.99, 8, 20.0902)]
    [InlineData(0.95, 30, 43.7730)]
    public void Chi_squared_quantiles_match_the_handbook_table(double p, double df, double x)
    {
        Assert.Equal(x, Quantiles.ChiSquared(p, df), 4);
    }

    [Fact]
    public void Quantiles_agree_with_R_qnorm_and_qchisq_to_1e12()
    {
        foreach (var row in ReferenceData.Csv("quantiles.csv"))
        {
            var p = ReferenceData.D(row["p"]);
            var expected = ReferenceData.D(row["value"]);
            var actual = row["kind"] == "normal" ? Quantiles.Normal(p) : Quantiles.ChiSquared(p, ReferenceData.D(row["df"]));
            if (expected == 0)
            {
                Assert.Equal(0, actual, 15);
            }
            else
            {
                Tolerance.Relative(expected, actual, 1e-12, $"{row["kind"]} quantile at p={p} df={row["df"]}");
            }
        }
    }

    [Fact]
    public void The_two_sided_z_of_a_level_is_the_upper_quantile_of_half_the_rest()
    {
        Assert.Equal(Quantiles.Normal(0.975), Quantiles.TwoSidedZ(0.95), 14);
        Assert.Throws<ArgumentOutOfRangeException>(() => Quantiles.TwoSidedZ(1.0));
        Assert.Throws<ArgumentOutOfRangeException>(() => Quantiles.TwoSidedZ(0.0));
    }
}
