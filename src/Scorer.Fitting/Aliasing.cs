using System.Globalization;

namespace Scorer.Fitting;

/// <summary>
/// Finds aliased terms (rank deficiency) from X'WX: a Cholesky factorisation of the correlation-scaled matrix taken in
/// term order, as R's pivoting QR keeps earlier columns; a term whose remaining variance is below 1e-9 of its own is a
/// linear combination of the terms before it, and the combination is named.
/// </summary>
internal static class Aliasing
{
    private const double Tolerance = 1e-9;

    public static void Check(double[,] a, IReadOnlyList<string> terms)
    {
        var k = terms.Count;
        var problems = new List<FitProblem>();
        var scale = new double[k];
        for (var j = 0; j < k; j++)
        {
            scale[j] = a[j, j] > 0 ? 1 / Math.Sqrt(a[j, j]) : 0;
            if (a[j, j] <= 0)
            {
                problems.Add(new FitProblem(terms[j], "is 0 in every row that carries weight, so its coefficient cannot be estimated"));
            }
        }

        // L·Lᵀ of the scaled matrix over the kept terms.
        var l = new double[k, k];
        var kept = new List<int>();
        foreach (var j in Enumerable.Range(0, k).Where(j => scale[j] > 0))
        {
            var row = new double[k];
            foreach (var i in kept)
            {
                var s = a[j, i] * scale[j] * scale[i];
                foreach (var m in kept.TakeWhile(m => m != i))
                {
                    s -= row[m] * l[i, m];
                }

                row[i] = s / l[i, i];
            }

            var d = 1.0 - kept.Sum(m => row[m] * row[m]);
            if (d < Tolerance)
            {
                problems.Add(new FitProblem(terms[j], "is aliased: it is a linear combination of " + Combination(a, kept, j, terms)
                    + "; leave one of them out"));
                continue;
            }

            for (var m = 0; m < k; m++)
            {
                l[j, m] = row[m];
            }

            l[j, j] = Math.Sqrt(d);
            kept.Add(j);
        }

        if (problems.Count > 0)
        {
            throw new FitException(problems);
        }
    }

    /// <summary>The least-squares coefficients of term j on the kept terms, as "1·a − 2·b".</summary>
    private static string Combination(double[,] a, List<int> kept, int j, IReadOnlyList<string> terms)
    {
        var m = MathNet.Numerics.LinearAlgebra.Matrix<double>.Build.Dense(kept.Count, kept.Count, (r, c) => a[kept[r], kept[c]]);
        var v = MathNet.Numerics.LinearAlgebra.Vector<double>.Build.Dense(kept.Count, r => a[kept[r], j]);
        var c = m.Solve(v);
        var parts = kept.Select((t, i) => (Term: terms[t], C: c[i]))
            .Where(p => Math.Abs(p.C) > 1e-6 * Math.Max(1, c.AbsoluteMaximum()))
            .Select(p => $"{p.C.ToString("G6", CultureInfo.InvariantCulture)}·{p.Term}");
        var text = string.Join(" + ", parts).Replace("+ -", "− ", StringComparison.Ordinal);
        return text.Length == 0 ? "the earlier terms" : text;
    }
}
