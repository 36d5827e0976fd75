using System.Runtime.CompilerServices;
using System.Runtime.Intrinsics;
using Scorer.Engine.Links;
using Scorer.Engine.Scoring;
using Scorer.ModelFile;

namespace Scorer.Engine;

/// <summary>
/// The dense batch path: rows in model feature order (as <see cref="ScoreFeatures"/> takes them), scored eight rows at
/// a time. Each block's design rows are transposed so that η = x'β and |Fᵀx|² run across the rows with SIMD, and
/// where the machine has Vector512 the logit and cloglog inverse links run across the rows too (probit per row).
/// </summary>
public sealed partial class CompiledModel
{
    private const int BlockRows = 8;

    /// <summary>Scores rows × <see cref="FeatureCount"/> values (row-major) into <paramref name="results"/>.</summary>
    /// <param name="warnings">Empty, or rows × <see cref="MaxWarningsPerRow"/> slots (row r's warnings start at r × MaxWarningsPerRow).</param>
    [SkipLocalsInit]
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
        var vectorLinks = Vector512.IsHardwareAccelerated && Link != LinkKind.Probit;
        var vectorDesign = Vector512.IsHardwareAccelerated && n <= 128 && ColFeature.Length + IndicatorFeature.Length <= 256;
        Span<Vector512<double>> featureVectors = vectorDesign ? stackalloc Vector512<double>[n] : default;
        Span<Vector512<double>> columnVectors = vectorDesign ? stackalloc Vector512<double>[ColFeature.Length + IndicatorFeature.Length] : default;

        for (var r0 = 0; r0 < rows; r0 += BlockRows)
        {
            var count = Math.Min(BlockRows, rows - r0);
            if (vectorDesign && count == BlockRows && TryDesignBlock(features.Slice(r0 * n, BlockRows * n), featureVectors, columnVectors, block))
            {
                LinearPredictorBlock(block, eta);
                if (band)
                {
                    QuadraticFormBlock(block, ss);
                }

                warningCounts.Clear();
                if (vectorLinks)
                {
                    FinishBlock(eta, ss, band, settings, results.Slice(r0, BlockRows), warningCounts, keepWarnings ? warnings.Slice(r0 * stride, BlockRows * stride) : default, stride);
                }
                else
                {
                    for (var lane = 0; lane < BlockRows; lane++)
                    {
                        var r = r0 + lane;
                        results[r] = FinishFrom(eta[lane], band ? ss[lane] : double.NaN, settings, keepWarnings ? warnings.Slice(r * stride, stride) : default, 0);
                    }
                }

                BlameOverflows(features, results, r0, BlockRows, values, levels);
                continue;
            }

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

                var use = ok[lane];
                for (var j = 0; j < k; j++)
                {
                    block[(j * BlockRows) + lane] = use ? x[j] : 0.0;
                }
            }

            LinearPredictorBlock(block, eta);
            if (band)
            {
                QuadraticFormBlock(block, ss);
            }

            if (vectorLinks && count == BlockRows && !ok.Contains(false))
            {
                FinishBlock(eta, ss, band, settings, results.Slice(r0, BlockRows), warningCounts, keepWarnings ? warnings.Slice(r0 * stride, BlockRows * stride) : default, stride);
                BlameOverflows(features, results, r0, BlockRows, values, levels);
                continue;
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

            BlameOverflows(features, results, r0, count, values, levels);
        }
    }

    /// <summary>Names the feature to blame in the block's overflow errors (rare: a cold path that binds the row again).</summary>
    private void BlameOverflows(ReadOnlySpan<double> features, Span<ScoredRow> results, int r0, int count, Span<double> values, Span<int> levels)
    {
        var n = FeatureCount;
        for (var r = r0; r < r0 + count; r++)
        {
            if (results[r].Error.Kind == RowErrorKind.Overflow && results[r].Error.Feature < 0)
            {
                BindDense(features.Slice(r * n, n), values, levels);
                results[r].Error = BlameOverflow(values);
            }
        }
    }

    /// <summary>
    /// Builds the design of eight rows at once, term-major (<c>block[term * 8 + lane]</c>), when the block is clean:
    /// every used value present, finite, inside the training range, a valid level code, inside its transform's domain.
    /// Anything else (a warning or an error to report) returns false, and the caller scores those rows one by one.
    /// </summary>
    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    private bool TryDesignBlock(ReadOnlySpan<double> features, Span<Vector512<double>> fv, Span<Vector512<double>> cv, Span<double> block)
    {
        var n = FeatureCount;
        if (features.Length < BlockRows * n)
        {
            return false;
        }

        for (var f = 0; f < n; f++)
        {
            if (!Used[f])
            {
                continue;
            }

            // Built from scalars rather than stored and reloaded, which would stall on store forwarding.
            var v = Vector512.Create(features[f], features[n + f], features[(2 * n) + f], features[(3 * n) + f],
                features[(4 * n) + f], features[(5 * n) + f], features[(6 * n) + f], features[(7 * n) + f]);
            if (Kinds[f] == FeatureKind.Numeric)
            {
                // NaN fails both comparisons, so missing values leave the fast path too.
                if (!Vector512.GreaterThanOrEqualAll(v, Vector512.Create(Min[f])) || !Vector512.LessThanOrEqualAll(v, Vector512.Create(Max[f])))
                {
                    return false;
                }
            }
            else if (!Vector512.GreaterThanOrEqualAll(v, Vector512<double>.Zero) || !Vector512.LessThanAll(v, Vector512.Create((double)LevelNames[f].Length))
                || !Vector512.EqualsAll(Vector512.Floor(v), v))
            {
                return false;
            }

            fv[f] = v;
        }

        for (var c = 0; c < ColFeature.Length; c++)
        {
            var v = fv[ColFeature[c]];
            Vector512<double> t;
            switch (ColTransform[c])
            {
                case TransformKind.Identity:
                    t = v;
                    break;
                case TransformKind.Log:
                    if (!Vector512.GreaterThanAll(v, Vector512<double>.Zero))
                    {
                        return false;
                    }

                    t = Vector512.Log(v);
                    break;
                case TransformKind.Sqrt:
                    if (!Vector512.GreaterThanOrEqualAll(v, Vector512<double>.Zero))
                    {
                        return false;
                    }

                    t = Vector512.Sqrt(v);
                    break;
                default:
                    if (!Vector512.GreaterThanAll(v, Vector512.Create(-1.0)))
                    {
                        return false;
                    }

                    t = VectorLinks.Log1P(v);
                    break;
            }

            cv[c] = (t - Vector512.Create(ColCenter[c])) / Vector512.Create(ColScale[c]);
        }

        var cols = ColFeature.Length;
        for (var i = 0; i < IndicatorFeature.Length; i++)
        {
            cv[cols + i] = Vector512.ConditionalSelect(Vector512.Equals(fv[IndicatorFeature[i]], Vector512.Create((double)IndicatorLevel[i])), Vector512<double>.One, Vector512<double>.Zero);
        }

        var refs = FactorRef;
        var starts = TermStart;
        for (var j = 0; j < Beta.Length; j++)
        {
            var value = Vector512<double>.One;
            for (var p = starts[j]; p < starts[j + 1]; p++)
            {
                value *= cv[refs[p]];
            }

            value.CopyTo(block.Slice(j * BlockRows, BlockRows));
        }

        return true;
    }

    /// <summary>η for the eight rows of a block, with two independent partial sums.</summary>
    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    private void LinearPredictorBlock(ReadOnlySpan<double> block, Span<double> eta)
    {
        var beta = Beta;
        if (Vector512.IsHardwareAccelerated)
        {
            var e0 = Vector512<double>.Zero;
            var e1 = Vector512<double>.Zero;
            var j = 0;
            for (; j + 2 <= beta.Length; j += 2)
            {
                e0 = Vector512.FusedMultiplyAdd(Vector512.Create(beta[j]), Vector512.Create(block.Slice(j * BlockRows, 8)), e0);
                e1 = Vector512.FusedMultiplyAdd(Vector512.Create(beta[j + 1]), Vector512.Create(block.Slice((j + 1) * BlockRows, 8)), e1);
            }

            if (j < beta.Length)
            {
                e0 = Vector512.FusedMultiplyAdd(Vector512.Create(beta[j]), Vector512.Create(block.Slice(j * BlockRows, 8)), e0);
            }

            (e0 + e1).CopyTo(eta);
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

    /// <summary>|Fᵀx|² for the eight rows of a block: one accumulator per column of F, so the multiply-adds are independent.</summary>
    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    private void QuadraticFormBlock(ReadOnlySpan<double> block, Span<double> ss)
    {
        var k = Beta.Length;
        if (Vector512.IsHardwareAccelerated)
        {
            // u_j = Σ_i Fᵀ[j, i]·x_i as a chain of multiply-adds in a register; two rows of Fᵀ at a time for two chains.
            var t = FactorT!;
            var tStart = FactorTStart!;
            var tFirst = FactorTFirst!;
            var s0 = Vector512<double>.Zero;
            var s1 = Vector512<double>.Zero;
            var j = 0;
            for (; j + 2 <= k; j += 2)
            {
                var u0 = Vector512<double>.Zero;
                var u1 = Vector512<double>.Zero;
                int p0 = tStart[j], p1 = tStart[j + 1];
                int f0 = tFirst[j], f1 = tFirst[j + 1];
                for (var i = f0; i < f1; i++)
                {
                    u0 = Vector512.FusedMultiplyAdd(Vector512.Create(t[p0++]), Vector512.Create(block.Slice(i * BlockRows, 8)), u0);
                }

                for (var i = f1; i < k; i++)
                {
                    var xi = Vector512.Create(block.Slice(i * BlockRows, 8));
                    u0 = Vector512.FusedMultiplyAdd(Vector512.Create(t[p0++]), xi, u0);
                    u1 = Vector512.FusedMultiplyAdd(Vector512.Create(t[p1++]), xi, u1);
                }

                s0 = Vector512.FusedMultiplyAdd(u0, u0, s0);
                s1 = Vector512.FusedMultiplyAdd(u1, u1, s1);
            }

            if (j < k)
            {
                var u = Vector512<double>.Zero;
                var p = tStart[j];
                for (var i = tFirst[j]; i < k; i++)
                {
                    u = Vector512.FusedMultiplyAdd(Vector512.Create(t[p++]), Vector512.Create(block.Slice(i * BlockRows, 8)), u);
                }

                s0 = Vector512.FusedMultiplyAdd(u, u, s0);
            }

            (s0 + s1).CopyTo(ss);
            return;
        }

        // Without Vector512: per row, the same accumulation as the single-row path.
        Span<double> x = k <= 256 ? stackalloc double[k] : new double[k];
        for (var lane = 0; lane < BlockRows; lane++)
        {
            for (var i = 0; i < k; i++)
            {
                x[i] = block[(i * BlockRows) + lane];
            }

            ss[lane] = QuadraticForm(x);
        }
    }

    /// <summary>Probability, band and delta-method se of eight rows at once (logit and cloglog, Vector512).</summary>
    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    private void FinishBlock(ReadOnlySpan<double> eta, ReadOnlySpan<double> ss, bool band, in ScoreSettings settings, Span<ScoredRow> results,
        ReadOnlySpan<int> warningCounts, Span<RowWarning> warnings, int stride)
    {
        var link = Link;
        var e = Vector512.Create(eta);
        var p = VectorLinks.Inverse(link, e);
        var lower = Vector512.Create(double.NaN);
        var upper = lower;
        var pse = lower;
        var se = lower;
        if (band)
        {
            se = Vector512.Sqrt(Vector512.Create(ss));
            var half = Vector512.Create(settings.Z) * se;
            lower = VectorLinks.Inverse(link, e - half);
            upper = VectorLinks.Inverse(link, e + half);
            pse = VectorLinks.Derivative(link, e) * se;
        }

        var threshold = Threshold;
        for (var lane = 0; lane < BlockRows; lane++)
        {
            ref var r = ref results[lane];
            r.Eta = eta[lane];
            r.Probability = p[lane];
            r.Se = se[lane];
            r.Lower = lower[lane];
            r.Upper = upper[lane];
            r.ProbabilitySe = pse[lane];
            r.Flag = double.IsNaN(threshold) ? (sbyte)-1 : r.Probability >= threshold ? (sbyte)1 : (sbyte)0;
            r.Error = default;
            if (!double.IsFinite(r.Eta) || (band && !double.IsFinite(ss[lane])))
            {
                r = FailedRow(new RowError(RowErrorKind.Overflow, -1));
                continue;
            }

            var count = warningCounts[lane];
            if (band && r.Se > MaxSe * (1 + 1e-9))
            {
                AddWarning(warnings.IsEmpty ? default : warnings.Slice(lane * stride, stride), ref count, new RowWarning(RowWarningKind.HiddenExtrapolation, -1, r.Se, MaxSe));
            }

            r.WarningCount = count;
        }
    }

    /// <summary>Copies the covariance factor F (V = F·Fᵀ) into a full k × k row-major matrix, zeros where F has none.</summary>
    internal void CopyCovarianceFactor(Span<double> full)
    {
        var k = TermCount;
        full[..(k * k)].Clear();
        for (var i = 0; i < k; i++)
        {
            var p = FactorRowStart![i];
            var len = FactorRowStart[i + 1] - p;
            Factor.AsSpan(p, len).CopyTo(full.Slice(i * k, len));
        }
    }
}
