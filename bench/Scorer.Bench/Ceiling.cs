using System.Runtime.CompilerServices;
using System.Runtime.Intrinsics;
using Scorer.Engine;

namespace Scorer.Bench;

/// <summary>
/// The ceiling the engine is measured against: only the arithmetic of η = x'β and x'Vx = |Lᵀx|² (L the Cholesky
/// factor, V = LLᵀ) on pre-built, row-major design rows: no feature lookup, no transforms, no inverse link, no result
/// struct. The scalar loop takes one row at a time; the SIMD loop eight rows per step (Vector512; four with Vector256
/// where the machine lacks it), transposing them first, with one accumulator per column of L so the multiply-adds are
/// independent.
/// </summary>
internal sealed class Ceiling
{
    private readonly int _k;
    private readonly double[] _beta;
    private readonly double[] _l; // k × k row-major, lower triangular
    private readonly double[] _lt; // its transpose

    public Ceiling(CompiledModel model)
    {
        _k = model.TermCount;
        _beta = model.Coefficients.ToArray();
        _l = new double[_k * _k];
        model.CopyCovarianceFactor(_l);
        _lt = new double[_k * _k];
        for (var i = 0; i < _k; i++)
        {
            for (var j = 0; j < _k; j++)
            {
                _lt[(j * _k) + i] = _l[(i * _k) + j];
            }
        }
    }

    [SkipLocalsInit]
    public void Scalar(double[] design, double[] eta, double[] se, bool band)
    {
        var k = _k;
        Span<double> u = stackalloc double[k];
        for (var r = 0; r < eta.Length; r++)
        {
            var x = design.AsSpan(r * k, k);
            double e0 = 0, e1 = 0;
            var j = 0;
            for (; j + 2 <= k; j += 2)
            {
                e0 += _beta[j] * x[j];
                e1 += _beta[j + 1] * x[j + 1];
            }

            if (j < k)
            {
                e0 += _beta[j] * x[j];
            }

            eta[r] = e0 + e1;
            if (band)
            {
                u.Clear();
                for (var i = 0; i < k; i++)
                {
                    var xi = x[i];
                    var row = _l.AsSpan(i * k, i + 1);
                    for (var m = 0; m < row.Length; m++)
                    {
                        u[m] += row[m] * xi;
                    }
                }

                var s = 0.0;
                for (var m = 0; m < k; m++)
                {
                    s += u[m] * u[m];
                }

                se[r] = Math.Sqrt(s);
            }
        }
    }

    /// <summary>As <see cref="Simd"/> but accumulating |Lᵀx|² by rows of Lᵀ (each u_j a chain of multiply-adds in a register).</summary>
    [SkipLocalsInit]
    public void SimdRows(double[] design, double[] eta, double[] se, bool band)
    {
        const int W = 8;
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

            var e0 = Vector512<double>.Zero;
            var e1 = Vector512<double>.Zero;
            var jj = 0;
            for (; jj + 2 <= k; jj += 2)
            {
                e0 = Vector512.FusedMultiplyAdd(Vector512.Create(_beta[jj]), Vector512.Create<double>(block.Slice(jj * W, W)), e0);
                e1 = Vector512.FusedMultiplyAdd(Vector512.Create(_beta[jj + 1]), Vector512.Create<double>(block.Slice((jj + 1) * W, W)), e1);
            }

            if (jj < k)
            {
                e0 = Vector512.FusedMultiplyAdd(Vector512.Create(_beta[jj]), Vector512.Create<double>(block.Slice(jj * W, W)), e0);
            }

            (e0 + e1).StoreUnsafe(ref eta[r0]);
            if (band)
            {
                var s0 = Vector512<double>.Zero;
                var s1 = Vector512<double>.Zero;
                var j = 0;
                for (; j + 2 <= k; j += 2)
                {
                    // u_j = Σ_{i ≥ j} L[i, j]·x_i, two rows of Lᵀ at once for two independent chains.
                    var u0 = Vector512<double>.Zero;
                    var u1 = Vector512<double>.Zero;
                    u0 = Vector512.FusedMultiplyAdd(Vector512.Create(_lt[(j * k) + j]), Vector512.Create<double>(block.Slice(j * W, W)), u0);
                    for (var i = j + 1; i < k; i++)
                    {
                        var xi = Vector512.Create<double>(block.Slice(i * W, W));
                        u0 = Vector512.FusedMultiplyAdd(Vector512.Create(_lt[(j * k) + i]), xi, u0);
                        u1 = Vector512.FusedMultiplyAdd(Vector512.Create(_lt[((j + 1) * k) + i]), xi, u1);
                    }

                    s0 = Vector512.FusedMultiplyAdd(u0, u0, s0);
                    s1 = Vector512.FusedMultiplyAdd(u1, u1, s1);
                }

                if (j < k)
                {
                    var u = Vector512<double>.Zero;
                    for (var i = j; i < k; i++)
                    {
                        u = Vector512.FusedMultiplyAdd(Vector512.Create(_lt[(j * k) + i]), Vector512.Create<double>(block.Slice(i * W, W)), u);
                    }

                    s0 = Vector512.FusedMultiplyAdd(u, u, s0);
                }

                Vector512.Sqrt(s0 + s1).StoreUnsafe(ref se[r0]);
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

    [SkipLocalsInit]
    private void Simd512(double[] design, double[] eta, double[] se, bool band)
    {
        const int W = 8;
        var k = _k;
        Span<double> block = stackalloc double[k * W];
        Span<Vector512<double>> acc = stackalloc Vector512<double>[k];
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

            var e0 = Vector512<double>.Zero;
            var e1 = Vector512<double>.Zero;
            var jj = 0;
            for (; jj + 2 <= k; jj += 2)
            {
                e0 = Vector512.FusedMultiplyAdd(Vector512.Create(_beta[jj]), Vector512.Create<double>(block.Slice(jj * W, W)), e0);
                e1 = Vector512.FusedMultiplyAdd(Vector512.Create(_beta[jj + 1]), Vector512.Create<double>(block.Slice((jj + 1) * W, W)), e1);
            }

            if (jj < k)
            {
                e0 = Vector512.FusedMultiplyAdd(Vector512.Create(_beta[jj]), Vector512.Create<double>(block.Slice(jj * W, W)), e0);
            }

            (e0 + e1).StoreUnsafe(ref eta[r0]);
            if (band)
            {
                acc.Clear();
                for (var i = 0; i < k; i++)
                {
                    var xi = Vector512.Create<double>(block.Slice(i * W, W));
                    for (var m = 0; m <= i; m++)
                    {
                        acc[m] = Vector512.FusedMultiplyAdd(Vector512.Create(_l[(i * k) + m]), xi, acc[m]);
                    }
                }

                var s = Vector512<double>.Zero;
                for (var m = 0; m < k; m++)
                {
                    s = Vector512.FusedMultiplyAdd(acc[m], acc[m], s);
                }

                Vector512.Sqrt(s).StoreUnsafe(ref se[r0]);
            }
        }
    }

    [SkipLocalsInit]
    private void Simd256(double[] design, double[] eta, double[] se, bool band)
    {
        const int W = 4;
        var k = _k;
        Span<double> block = stackalloc double[k * W];
        Span<Vector256<double>> acc = stackalloc Vector256<double>[k];
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
                acc.Clear();
                for (var i = 0; i < k; i++)
                {
                    var xi = Vector256.Create<double>(block.Slice(i * W, W));
                    for (var m = 0; m <= i; m++)
                    {
                        acc[m] = Vector256.FusedMultiplyAdd(Vector256.Create(_l[(i * k) + m]), xi, acc[m]);
                    }
                }

                var s = Vector256<double>.Zero;
                for (var m = 0; m < k; m++)
                {
                    s = Vector256.FusedMultiplyAdd(acc[m], acc[m], s);
                }

                Vector256.Sqrt(s).StoreUnsafe(ref se[r0]);
            }
        }
    }
}
