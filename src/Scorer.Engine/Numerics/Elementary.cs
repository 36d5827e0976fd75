using System.Runtime.CompilerServices;

namespace Scorer.Engine.Numerics;

/// <summary>
/// e^x − 1 and ln(1 + x) accurate to a few ulps for every x. The BCL's double.ExpM1/LogP1 compute Exp(x) − 1 and
/// Log(x + 1) directly, and MathNet's Expm1 is off by about 1e-12 relative near x = −3e-4 (seen against R's expm1), so
/// both use the classic correction: with u = fl(e^x), (u − 1)·x / ln u (Kahan), and with u = fl(1 + x),
/// ln(u)·x / (u − 1) (Goldberg 1991, Theorem 4).
/// </summary>
public static class Elementary
{
    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static double ExpM1(double x)
    {
        if (Math.Abs(x) > 0.5)
        {
            return Math.Exp(x) - 1.0;
        }

        var u = Math.Exp(x);
        if (u == 1.0)
        {
            return x;
        }

        var um1 = u - 1.0;
        return um1 == -1.0 ? -1.0 : um1 * x / Math.Log(u);
    }

    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static double Log1P(double x)
    {
        var u = 1.0 + x;
        if (u == 1.0)
        {
            return x;
        }

        return double.IsPositiveInfinity(u) ? Math.Log(x) : Math.Log(u) * x / (u - 1.0);
    }
}
