using MathNet.Numerics.Distributions;
using Scorer.Engine.Numerics;
using Scorer.Statistics;
using Xunit.Abstractions;

namespace Scorer.Statistics.Tests;

/// <summary>Paired log-loss and Brier comparisons (Diebold–Mariano without HAC).</summary>
public sealed class PairedLossTests(ITestOutputHelper output)
{
    private readonly Near near = new(output);

    public static TheoryData<string, string> Pairs => new()
    {
        { "pima-logit", "pima-miscalibrated" },
        { "pima-logit", "pima-cloglog" },
    };

    [Theory]
    [MemberData(nameof(Pairs))]
    public void Paired_log_loss_and_Brier_means_agree_with_sklearn_and_the_se_with_the_paired_formula(string first, string second)
    {
        var a = ReferenceCase.Load(first);
        var b = ReferenceCase.Load(second);
        Assert.Equal(a.Y, b.Y);
        var y = a.Y;
        var zc = Quantiles.TwoSidedZ(0.95);

        foreach (var (kind, result, field, loss) in new (string, PairedLossComparison, string, Func<double, byte, double>)[]
        {
            ("log loss", PairedLoss.LogLoss(a.P, b.P, y), "log_loss", (p, o) => o == 1 ? -Math.Log(p) : -Math.Log(1 - p)),
            ("brier", PairedLoss.Brier(a.P, b.P, y), "brier", (p, o) => (p - o) * (p - o)),
        })
        {
            // Means: sklearn log_loss and brier_score_loss of each case.
            Assert.Equal(y.Length, result.Count);
            near.Relative(a.Number(field), result.MeanA, 1e-12, $"{kind} mean a");
            near.Relative(b.Number(field), result.MeanB, 1e-12, $"{kind} mean b");
            near.Relative(a.Number(field) - b.Number(field), result.Difference, 1e-10, $"{kind} difference");

            // The paired-difference formula evaluated directly here: d_i, mean, sample sd/√n, normal p from MathNet.
            // (ln(1 − p) here is naive; on pima-cloglog's extreme rows it still agrees to 1e-10 of the mean.)
            var d = Enumerable.Range(0, y.Length).Select(i => loss(a.P[i], y[i]) - loss(b.P[i], y[i])).ToArray();
            var mean = d.Average();
            var se = Math.Sqrt(d.Sum(v => (v - mean) * (v - mean)) / (d.Length - 1) / d.Length);
            near.Relative(se, result.Se, 1e-9, $"{kind} se");
            near.Relative(mean / se, result.Z, 1e-9, $"{kind} z");
            near.Relative(2 * Normal.CDF(0, 1, -Math.Abs(mean / se)), result.P, 1e-9, $"{kind} p");
            near.Relative(mean - zc * se, result.Lower, 1e-9, $"{kind} lower");
            near.Relative(mean + zc * se, result.Upper, 1e-9, $"{kind} upper");
        }
    }

    [Fact]
    public void A_forecast_compared_with_itself_has_zero_difference_z_zero_and_p_one()
    {
        var c = ReferenceCase.Load("birthwt-probit");
        var r = PairedLoss.LogLoss(c.P, c.P, c.Y);
        Assert.Equal(0.0, r.Difference);
        Assert.Equal(0.0, r.Se);
        Assert.Equal(0.0, r.Z);
        Assert.Equal(1.0, r.P);
        // sklearn log_loss
        near.Relative(c.Number("log_loss"), r.MeanA, 1e-12, "mean");
    }

    [Fact]
    public void No_rows_give_NaN_and_one_row_gives_a_difference_without_se()
    {
        var empty = PairedLoss.Brier([], [], []);
        Assert.Equal(0, empty.Count);
        Assert.True(double.IsNaN(empty.Difference) && double.IsNaN(empty.Se) && double.IsNaN(empty.P));
        var one = PairedLoss.Brier([0.5], [0.25], [1]);
        // (0.5 − 1)² − (0.25 − 1)² = 0.25 − 0.5625 (definition of the squared error).
        Assert.Equal(0.25 - 0.5625, one.Difference);
        Assert.True(double.IsNaN(one.Se) && double.IsNaN(one.Z) && double.IsNaN(one.Lower));
    }
}
