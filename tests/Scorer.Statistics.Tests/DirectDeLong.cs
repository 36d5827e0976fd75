namespace Scorer.Statistics.Tests;

/// <summary>
/// DeLong, DeLong &amp; Clarke-Pearson (1988) evaluated straight from the definitions, in O(mn): ψ(x, y) = 1 if x &gt; y,
/// ½ if x = y, 0 otherwise; V10_i = mean over controls of ψ(case i, control j), V01_j = mean over cases; S = sample
/// (co)variances; Var(A − B) = (S10_aa + S10_bb − 2 S10_ab)/m + (S01_aa + S01_bb − 2 S01_ab)/n. Independent of the
/// midrank algorithm under test.
/// </summary>
internal static class DirectDeLong
{
    public static (double AucA, double AucB, double VarA, double VarB, double Cov) Evaluate(double[] a, double[] b, byte[] y)
    {
        var cases = Enumerable.Range(0, y.Length).Where(i => y[i] == 1).ToArray();
        var controls = Enumerable.Range(0, y.Length).Where(i => y[i] == 0).ToArray();
        double m = cases.Length, n = controls.Length;
        static double Psi(double x, double z) => x > z ? 1.0 : x == z ? 0.5 : 0.0;
        double[] V10(double[] s) => cases.Select(i => controls.Sum(j => Psi(s[i], s[j])) / n).ToArray();
        double[] V01(double[] s) => controls.Select(j => cases.Sum(i => Psi(s[i], s[j])) / m).ToArray();
        double Cov(double[] u, double[] v)
        {
            double mu = u.Average(), mv = v.Average();
            return u.Zip(v, (p, q) => (p - mu) * (q - mv)).Sum() / (u.Length - 1);
        }

        var a10 = V10(a);
        var a01 = V01(a);
        var b10 = V10(b);
        var b01 = V01(b);
        return (a10.Average(), b10.Average(),
            Cov(a10, a10) / m + Cov(a01, a01) / n,
            Cov(b10, b10) / m + Cov(b01, b01) / n,
            Cov(a10, b10) / m + Cov(a01, b01) / n);
    }
}
