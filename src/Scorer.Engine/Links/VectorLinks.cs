using System.Runtime.CompilerServices;
using System.Runtime.Intrinsics;
using Scorer.ModelFile;

namespace Scorer.Engine.Links;

/// <summary>
/// The logit and cloglog inverse links and derivatives on eight values at once, by the same formulas as
/// <see cref="Link"/> (Vector512.Exp and Log are within a few ulps of Math.Exp and Math.Log). Probit is not here:
/// there is no vector erfc, and <see cref="Link.NormalCdf"/> runs per value.
/// </summary>
internal static class VectorLinks
{
    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static Vector512<double> Inverse(LinkKind link, Vector512<double> eta) => link == LinkKind.Logit ? Logistic(eta) : InverseCLogLog(eta);

    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static Vector512<double> Derivative(LinkKind link, Vector512<double> eta)
    {
        if (link == LinkKind.Logit)
        {
            var e = Vector512.Exp(-Vector512.Abs(eta));
            var d = Vector512<double>.One + e;
            return e / (d * d);
        }

        // exp(η − e^η); e^η = ∞ gives exp(−∞) = 0.
        return Vector512.Exp(eta - Vector512.Exp(eta));
    }

    /// <summary>1/(1 + e^−η) for η ≥ 0 and e^η/(1 + e^η) below, both from e = e^−|η|.</summary>
    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static Vector512<double> Logistic(Vector512<double> eta)
    {
        var e = Vector512.Exp(-Vector512.Abs(eta));
        var inv = Vector512<double>.One / (Vector512<double>.One + e);
        return Vector512.ConditionalSelect(Vector512.GreaterThanOrEqual(eta, Vector512<double>.Zero), inv, e * inv);
    }

    /// <summary>−expm1(−e^η), with expm1 corrected as in <see cref="Numerics.Elementary.ExpM1"/>.</summary>
    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static Vector512<double> InverseCLogLog(Vector512<double> eta)
    {
        var y = -Vector512.Exp(eta); // y ≤ 0
        var u = Vector512.Exp(y);
        var um1 = u - Vector512<double>.One;
        var corrected = um1 * y / Vector512.Log(u);
        var small = Vector512.LessThanOrEqual(Vector512.Abs(y), Vector512.Create(0.5));
        var unit = Vector512.Equals(u, Vector512<double>.One);
        var expm1 = Vector512.ConditionalSelect(small, Vector512.ConditionalSelect(unit, y, corrected), um1);
        return -expm1;
    }

    /// <summary>ln(1 + x) for x &gt; −1, corrected as in <see cref="Numerics.Elementary.Log1P"/>.</summary>
    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static Vector512<double> Log1P(Vector512<double> x)
    {
        var u = Vector512<double>.One + x;
        var corrected = Vector512.Log(u) * x / (u - Vector512<double>.One);
        return Vector512.ConditionalSelect(Vector512.Equals(u, Vector512<double>.One), x, corrected);
    }
}
