using Scorer.Engine.Numerics;

namespace Scorer.Statistics;

/// <summary>
/// Paired comparison of two probability forecasts of the same cases by their per-case losses: d_i = loss_a,i −
/// loss_b,i, mean difference, se = s_d/√n, the interval mean ∓ z·se, z and a two-sided normal p. The cases are treated
/// as independent: this is the Diebold–Mariano (1995) statistic without a HAC (autocorrelation-consistent) variance.
/// See <see cref="PairedLossComparison"/> for n ≤ 1 and se = 0.
/// </summary>
public static class PairedLoss
{
    /// <summary>
    /// Compares log losses −(y ln p + (1 − y) ln(1 − p)), with p clipped to [1e-15, 1 − 1e-15] as in
    /// <see cref="CalibrationStatistics.LogLossClip"/>. A negative difference favours a.
    /// </summary>
    /// <exception cref="ArgumentException">Lengths differ, a p is NaN or outside [0, 1], or an outcome is not 0 or 1.</exception>
    /// <exception cref="ArgumentOutOfRangeException"><paramref name="level"/> is not strictly between 0 and 1.</exception>
    public static PairedLossComparison LogLoss(ReadOnlySpan<double> a, ReadOnlySpan<double> b, ReadOnlySpan<byte> outcome, double level = 0.95) =>
        Compare(a, b, outcome, level, logLoss: true);

    /// <summary>Compares squared errors (p − y)², whose means are the Brier scores. A negative difference favours a.</summary>
    /// <exception cref="ArgumentException">Lengths differ, a p is NaN or outside [0, 1], or an outcome is not 0 or 1.</exception>
    /// <exception cref="ArgumentOutOfRangeException"><paramref name="level"/> is not strictly between 0 and 1.</exception>
    public static PairedLossComparison Brier(ReadOnlySpan<double> a, ReadOnlySpan<double> b, ReadOnlySpan<byte> outcome, double level = 0.95) =>
        Compare(a, b, outcome, level, logLoss: false);

    private static PairedLossComparison Compare(
        ReadOnlySpan<double> a, ReadOnlySpan<double> b, ReadOnlySpan<byte> outcome, double level, bool logLoss)
    {
        Guard.SameLength(a.Length, b.Length, nameof(b), nameof(a));
        Guard.SameLength(a.Length, outcome.Length, nameof(outcome), nameof(a));
        Guard.Probabilities(a, nameof(a));
        Guard.Probabilities(b, nameof(b));
        Guard.Outcomes(outcome, nameof(outcome));
        var zCrit = Quantiles.TwoSidedZ(level);
        var n = a.Length;
        if (n == 0)
        {
            return new PairedLossComparison(0, double.NaN, double.NaN, double.NaN, double.NaN, double.NaN, double.NaN, double.NaN, double.NaN);
        }

        double sumA = 0.0, sumB = 0.0, sumD = 0.0;
        for (var i = 0; i < n; i++)
        {
            var la = Loss(a[i], outcome[i], logLoss);
            var lb = Loss(b[i], outcome[i], logLoss);
            sumA += la;
            sumB += lb;
            sumD += la - lb;
        }

        var meanD = sumD / n;
        var squares = 0.0;
        for (var i = 0; i < n; i++)
        {
            var e = Loss(a[i], outcome[i], logLoss) - Loss(b[i], outcome[i], logLoss) - meanD;
            squares += e * e;
        }

        var se = n > 1 ? Math.Sqrt(squares / (n - 1) / n) : double.NaN;
        var (z, p) = Tails.Wald(meanD, se);
        return new PairedLossComparison(n, sumA / n, sumB / n, meanD, se, meanD - zCrit * se, meanD + zCrit * se, z, p);
    }

    private static double Loss(double p, byte y, bool logLoss)
    {
        if (!logLoss)
        {
            var r = p - y;
            return r * r;
        }

        var clipped = Math.Clamp(p, CalibrationStatistics.LogLossClip, 1.0 - CalibrationStatistics.LogLossClip);
        return y == 1 ? -Math.Log(clipped) : -Elementary.Log1P(-clipped);
    }
}
