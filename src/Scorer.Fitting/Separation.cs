namespace Scorer.Fitting;

/// <summary>
/// Complete or quasi-complete separation (Albert &amp; Anderson 1984): the maximum-likelihood estimate does not exist,
/// some estimates run off to infinity and the fitted probabilities of some rows reach 0 or 1. The signs looked for,
/// after Lesaffre &amp; Albert (1989): rows fitted within 10·ε of 0 or 1 (R's glm.fit warning), and terms whose
/// |estimate| kept growing over the last iterations or whose effect over the data's range exceeds 30 on the link
/// scale. Such a fit is refused with the diverging terms named.
/// </summary>
internal static class Separation
{
    private const int Window = 8;

    public static void Check(IrlsResult fit, double[] x, int k, IReadOnlyList<string> terms, int rows)
    {
        if (fit.FittedAtBoundary == 0 && fit.Converged)
        {
            return;
        }

        var diverging = Diverging(fit, x, k, rows);
        if (fit.FittedAtBoundary == 0 && diverging.Count == 0)
        {
            return; // not converged, but no sign of separation: reported as non-convergence
        }

        var named = diverging.Count > 0 ? string.Join(", ", diverging.Select(j => terms[j])) : "none identified";
        throw new FitException(diverging.Count > 0 ? string.Join(", ", diverging.Select(j => terms[j])) : "",
            $"complete or quasi-complete separation: {fit.FittedAtBoundary} row(s) have fitted probabilities numerically 0 or 1 " +
            $"and the estimates of these terms diverge: {named}. The maximum-likelihood estimate does not exist; leave out or merge " +
            "those terms or levels, or gather data where the outcome varies within them");
    }

    private static List<int> Diverging(IrlsResult fit, double[] x, int k, int rows)
    {
        var result = new List<int>();
        var h = fit.History;
        for (var j = 0; j < k; j++)
        {
            double lo = double.PositiveInfinity, hi = double.NegativeInfinity;
            for (var i = 0; i < rows; i++)
            {
                var v = x[(i * k) + j];
                lo = Math.Min(lo, v);
                hi = Math.Max(hi, v);
            }

            var effect = Math.Abs(fit.Beta[j]) * (hi - lo);
            var growing = h.Count > Window && Enumerable.Range(h.Count - Window, Window - 1)
                .All(t => Math.Abs(h[t + 1][j]) > Math.Abs(h[t][j]) + 0.05 && Math.Sign(h[t + 1][j]) == Math.Sign(h[t][j]));
            if (effect > 30 || growing)
            {
                result.Add(j);
            }
        }

        return result;
    }
}
