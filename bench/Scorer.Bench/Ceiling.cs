using System.Runtime.CompilerServices;
using System.Runtime.Intrinsics;
using Scorer.Engine;

namespace Scorer.Bench;

/// <summary>
/// The ceiling the engine is measured against: only the arithmetic of η = x'β and |U·x|² on pre-built, row-major design
/// rows (no feature lookup, no transforms, no inverse link, no result struct). The SIMD loop takes several rows per
/// step (Vector512 where the machine has it, else Vector256), the scalar loop one.
/// </summary>
internal sealed class Ceiling
{
    private readonly int _k;
    private readonly double[] _beta;
    private readonly double[] _u; // upper-triangular factor, full k × k, row-major (zeros below the diagonal)

    public Ceiling(CompiledModel model)
    {
        _k = model.TermCount;
        _beta = model.Coefficients.ToArray();
        _u = new double[_k * _k];
        model.CopyCovarianceFactor(_u);
    }

    public void Scalar(double[] design, double[] eta, double[] se, bool band)
    {
        var k = _k;
        for (var r = 0; r < eta.Length; r++)
        {
            var x = design.AsSpan(r * k, k);
            var e = 0.0;
            for (var j = 0; j < k; j++)
            {
                e += _beta[j] * x[j];
            }

            eta[r] = e;
            if (band)
            {
                var s = 0.0;
                for (var j = 0; j < k; j++)
                {
                    var u = 0.0;
                    var row = _u.AsSpan(j * k, k);
                    for (var i = j; i < k; i++)
                    {
                        u += row[i] * x[i];
                    }

                    s += u * u;
                }

                se[r] = Math.Sqrt(s);
            }
        }
    }

    public void Simd(double[] design, double[] eta, double[] se, bool band)
    {
        if (Vector512.IsHardwareAccelerated)
        {
            Simd512(design, eta, se, band);
        }
        else
        {
            Simd256(design, eta, se, band);
        }
    }

    [MethodImpl(MethodImplOptions.AggressiveOptimization)]
    private void Simd512(double[] design, double[] eta, double[] se, bool band)
    {
        const int W = 8;
        var k = _k;
        Span<double> block = stackalloc double[k * W];
        for (var r0 = 0; r0 + W <= eta.Length; r0 += W)
        {
            // Transpose W rows into block[term * W + lane].
            for (var lane = 0; lane < W; lane++)
            {
                var x = design.AsSpan((r0 + lane) * k, k);
                for (var j = 0; j < k; j++)
                {
                    block[(j * W) + lane] = x[j];
                }
            }

            var e = Vector512<double>.Zero;
            for (var j = 0; j < k; j++)
            {
                e = Vector512.FusedMultiplyAdd(Vector512.Create(_beta[j]), Vector512.Create<double>(block.Slice(j * W, W)), e);
            }

            e.StoreUnsafe(ref eta[r0]);
            if (band)
            {
                var s = Vector512<double>.Zero;
                for (var j = 0; j < k; j++)
                {
                    var u = Vector512<double>.Zero;
                    for (var i = j; i < k; i++)
                    {
                        u = Vector512.FusedMultiplyAdd(Vector512.Create(_u[(j * k) + i]), Vector512.Create<double>(block.Slice(i * W, W)), u);
                    }

                    s = Vector512.FusedMultiplyAdd(u, u, s);
                }

                Vector512.Sqrt(s).StoreUnsafe(ref se[r0]);
            }
        }
    }

    [MethodImpl(MethodImplOptions.AggressiveOptimization)]
    private void Simd256(double[] design, double[] eta, double[] se, bool band)
    {
        const int W = 4;
        var k = _k;
        Span<double> block = stackalloc double[k * W];
        for (var r0 = 0; r0 + W <= eta.Length; r0 += W)
        {
            for (var lane = 0; lane < W; lane++)
            {
                var x = design.AsSpan((r0 + lane) * k, k);
                for (var j = 0; j < k; j++)
                {
                    block[(j * W) + lane] = x[j];
                }
            }

            var e = Vector256<double>.Zero;
            for (var j = 0; j < k; j++)
            {
                e = Vector256.FusedMultiplyAdd(Vector256.Create(_beta[j]), Vector256.Create<double>(block.Slice(j * W, W)), e);
            }

            e.StoreUnsafe(ref eta[r0]);
            if (band)
            {
                var s = Vector256<double>.Zero;
                for (var j = 0; j < k; j++)
                {
                    var u = Vector256<double>.Zero;
                    for (var i = j; i < k; i++)
                    {
                        u = Vector256.FusedMultiplyAdd(Vector256.Create(_u[(j * k) + i]), Vector256.Create<double>(block.Slice(i * W, W)), u);
                    }

                    s = Vector256.FusedMultiplyAdd(u, u, s);
                }

                Vector256.Sqrt(s).StoreUnsafe(ref se[r0]);
            }
        }
    }
}
