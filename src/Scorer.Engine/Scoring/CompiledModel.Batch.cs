using System.Runtime.CompilerServices;
using System.Runtime.Intrinsics;
using Scorer.Engine.Scoring;

namespace Scorer.Engine;

/// <summary>
/// The dense batch path: rows in model feature order (as <see cref="ScoreFeatures"/> takes them), scored a block of
/// rows at a time. Each block's design rows are transposed so that η = x'β and |U·x|² run across the rows with SIMD
/// (eight rows per step with Vector512, four with Vector256); the inverse links then run per row.
/// </summary>
public sealed partial class CompiledModel
{
    private const int BlockRows = 8;

    /// <summary>Scores rows × <see cref="FeatureCount"/> values (row-major) into <paramref name="results"/>.</summary>
    /// <param name="warnings">Empty, or rows × <see cref="MaxWarningsPerRow"/> slots (row r's warnings start at r × MaxWarningsPerRow).</param>
    public void ScoreBatch(ReadOnlySpan<double> features, Span<ScoredRow> results, in ScoreSettings settings, Span<RowWarning> warnings = default)
    {
        var n = FeatureCount;
        var k = TermCount;
        var rows = n == 0 ? results.Length : features.Length / n;
        if (n > 0 && features.Length != rows * n)
        {
            throw new ArgumentException($"{features.Length} values are not a whole number of rows of {n} features", nameof(features));
        }

        if (results.Length < rows)
        {
            throw new ArgumentException($"room for {results.Length} results, {rows} rows given", nameof(results));
        }

        var stride = MaxWarningsPerRow;
        var keepWarnings = warnings.Length >= rows * stride;
        Span<double> values = n <= 64 ? stackalloc double[n] : new double[n];
        Span<int> levels = n <= 64 ? stackalloc int[n] : new int[n];
        Span<double> x = k <= 128 ? stackalloc double[k] : new double[k];
        Span<double> block = k <= 128 ? stackalloc double[k * BlockRows] : new double[k * BlockRows];
        Span<double> eta = stackalloc double[BlockRows];
        Span<double> ss = stackalloc double[BlockRows];
        Span<bool> ok = stackalloc bool[BlockRows];
        Span<int> warningCounts = stackalloc int[BlockRows];
        var band = settings.Band && Factor is not null;

        for (var r0 = 0; r0 < rows; r0 += BlockRows)
        {
            var count = Math.Min(BlockRows, rows - r0);
            for (var lane = 0; lane < BlockRows; lane++)
            {
                ok[lane] = false;
                warningCounts[lane] = 0;
                if (lane < count)
                {
                    var r = r0 + lane;
                    var w = keepWarnings ? warnings.Slice(r * stride, stride) : default;
                    BindDense(features.Slice(r * n, n), values, levels);
                    var error = Resolve(values, levels, w, ref warningCounts[lane]);
                    if (!error.IsError)
                    {
                        error = Design(values, levels, x);
                    }

                    if (error.IsError)
                    {
                        results[r] = FailedRow(error);
                    }
                    else
                    {
                        ok[lane] = true;
                    }
                }

                for (var j = 0; j < k; j++)
                {
                    block[(j * BlockRows) + lane] = ok[lane] ? x[j] : 0.0;
                }
            }

            LinearPredictorBlock(block, eta);
            if (band)
            {
                QuadraticFormBlock(block, ss);
            }

            for (var lane = 0; lane < count; lane++)
            {
                if (ok[lane])
                {
                    var r = r0 + lane;
                    var w = keepWarnings ? warnings.Slice(r * stride, stride) : default;
                    results[r] = FinishFrom(eta[lane], band ? ss[lane] : double.NaN, settings, w, warningCounts[lane]);
                }
            }
        }
    }

    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    private void LinearPredictorBlock(ReadOnlySpan<double> block, Span<double> eta)
    {
        var beta = Beta;
        if (Vector512.IsHardwareAccelerated)
        {
            var e = Vector512<double>.Zero;
            for (var j = 0; j < beta.Length; j++)
            {
                e = Vector512.FusedMultiplyAdd(Vector512.Create(beta[j]), Vector512.Create(block.Slice(j * BlockRows, 8)), e);
            }

            e.CopyTo(eta);
        }
        else if (Vector256.IsHardwareAccelerated)
        {
            var lo = Vector256<double>.Zero;
            var hi = Vector256<double>.Zero;
            for (var j = 0; j < beta.Length; j++)
            {
                var b = Vector256.Create(beta[j]);
                lo = Vector256.FusedMultiplyAdd(b, Vector256.Create(block.Slice(j * BlockRows, 4)), lo);
                hi = Vector256.FusedMultiplyAdd(b, Vector256.Create(block.Slice((j * BlockRows) + 4, 4)), hi);
            }

            lo.CopyTo(eta);
            hi.CopyTo(eta[4..]);
        }
        else
        {
            eta.Clear();
            for (var j = 0; j < beta.Length; j++)
            {
                for (var lane = 0; lane < BlockRows; lane++)
                {
                    eta[lane] += beta[j] * block[(j * BlockRows) + lane];
                }
            }
        }
    }

    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    private void QuadraticFormBlock(ReadOnlySpan<double> block, Span<double> ss)
    {
        var factor = Factor!;
        var start = FactorRowStart!;
        var first = FactorRowFirst!;
        var k = Beta.Length;
        if (Vector512.IsHardwareAccelerated)
        {
            var s = Vector512<double>.Zero;
            for (var j = 0; j < k; j++)
            {
                var u = Vector512<double>.Zero;
                var p = start[j];
                for (var i = first[j]; i < k; i++, p++)
                {
                    u = Vector512.FusedMultiplyAdd(Vector512.Create(factor[p]), Vector512.Create(block.Slice(i * BlockRows, 8)), u);
                }

                s = Vector512.FusedMultiplyAdd(u, u, s);
            }

            s.CopyTo(ss);
        }
        else if (Vector256.IsHardwareAccelerated)
        {
            var slo = Vector256<double>.Zero;
            var shi = Vector256<double>.Zero;
            for (var j = 0; j < k; j++)
            {
                var ulo = Vector256<double>.Zero;
                var uhi = Vector256<double>.Zero;
                var p = start[j];
                for (var i = first[j]; i < k; i++, p++)
                {
                    var f = Vector256.Create(factor[p]);
                    ulo = Vector256.FusedMultiplyAdd(f, Vector256.Create(block.Slice(i * BlockRows, 4)), ulo);
                    uhi = Vector256.FusedMultiplyAdd(f, Vector256.Create(block.Slice((i * BlockRows) + 4, 4)), uhi);
                }

                slo = Vector256.FusedMultiplyAdd(ulo, ulo, slo);
                shi = Vector256.FusedMultiplyAdd(uhi, uhi, shi);
            }

            slo.CopyTo(ss);
            shi.CopyTo(ss[4..]);
        }
        else
        {
            ss.Clear();
            for (var j = 0; j < k; j++)
            {
                for (var lane = 0; lane < BlockRows; lane++)
                {
                    var u = 0.0;
                    var p = start[j];
                    for (var i = first[j]; i < k; i++, p++)
                    {
                        u += factor[p] * block[(i * BlockRows) + lane];
                    }

                    ss[lane] += u * u;
                }
            }
        }
    }

    /// <summary>Copies the covariance factor U (V = UᵀU) into a full k × k row-major matrix, zeros where U has none.</summary>
    internal void CopyCovarianceFactor(Span<double> full)
    {
        var k = TermCount;
        full[..(k * k)].Clear();
        for (var j = 0; j < k; j++)
        {
            var p = FactorRowStart![j];
            for (var i = FactorRowFirst![j]; i < k; i++, p++)
            {
                full[(j * k) + i] = Factor![p];
            }
        }
    }
}
