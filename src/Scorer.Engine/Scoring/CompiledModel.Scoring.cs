using Scorer.Engine.Numerics;
using System.Runtime.CompilerServices;
using Scorer.Engine.Links;
using Scorer.Engine.Scoring;
using Scorer.ModelFile;

namespace Scorer.Engine;

/// <summary>Scoring: named rows, dense rows, and pre-built design rows. Nothing here allocates.</summary>
public sealed partial class CompiledModel
{
    /// <summary>Scores a row given as named values; names not in the model are ignored.</summary>
    /// <param name="row">The row's values with their names, in any order.</param>
    /// <param name="settings">Band or point only.</param>
    /// <param name="contributions">Receives β_j (x_j − x̄_j) per term, x̄_j the training mean when the file gives it, else 0 (length <see cref="TermCount"/>), or empty.</param>
    /// <param name="warnings">Receives the row's warnings (length <see cref="MaxWarningsPerRow"/>), or empty.</param>
    public ScoredRow Score(ReadOnlySpan<NamedValue> row, in ScoreSettings settings, Span<double> contributions = default, Span<RowWarning> warnings = default)
    {
        var n = FeatureCount;
        Span<double> values = n <= 64 ? stackalloc double[n] : new double[n];
        Span<int> levels = n <= 64 ? stackalloc int[n] : new int[n];
        var warningCount = 0;
        var error = Bind(row, values, levels, warnings, ref warningCount);
        return error.IsError ? FailedRow(error) : ScoreBound(values, levels, settings, contributions, warnings, warningCount);
    }

    /// <summary>
    /// Scores a row given in model feature order: numeric values as they are (NaN = missing), categorical values as the
    /// 0-based index of the level in the model file's <c>levels</c> (NaN = missing).
    /// </summary>
    public ScoredRow ScoreFeatures(ReadOnlySpan<double> featureValues, in ScoreSettings settings, Span<double> contributions = default, Span<RowWarning> warnings = default)
    {
        var n = FeatureCount;
        if (featureValues.Length != n)
        {
            throw new ArgumentException($"expected {n} feature values, got {featureValues.Length}", nameof(featureValues));
        }

        Span<double> values = n <= 64 ? stackalloc double[n] : new double[n];
        Span<int> levels = n <= 64 ? stackalloc int[n] : new int[n];
        BindDense(featureValues, values, levels);
        return ScoreBound(values, levels, settings, contributions, warnings, 0);
    }

    /// <summary>Scores a pre-built design row x (one value per term, in term order).</summary>
    public ScoredRow ScoreDesign(ReadOnlySpan<double> x, in ScoreSettings settings, Span<double> contributions = default)
    {
        if (x.Length != TermCount)
        {
            throw new ArgumentException($"expected {TermCount} term values, got {x.Length}", nameof(x));
        }

        return Finish(x, settings, contributions, default, 0);
    }

    /// <summary>Builds the design row x of a named row; returns the error when the row cannot be scored.</summary>
    public RowError BuildDesign(ReadOnlySpan<NamedValue> row, Span<double> x, Span<RowWarning> warnings, out int warningCount)
    {
        var n = FeatureCount;
        Span<double> values = n <= 64 ? stackalloc double[n] : new double[n];
        Span<int> levels = n <= 64 ? stackalloc int[n] : new int[n];
        warningCount = 0;
        var error = Bind(row, values, levels, warnings, ref warningCount);
        if (error.IsError)
        {
            return error;
        }

        error = Resolve(values, levels, warnings, ref warningCount);
        return error.IsError ? error : Design(values, levels, x);
    }

    /// <summary>
    /// Builds the design row x of a row in model feature order (categoricals as level codes, as
    /// <see cref="ScoreFeatures"/> takes them), applying the file's policies; returns the error when it cannot.
    /// </summary>
    public RowError BuildDesignFromFeatures(ReadOnlySpan<double> featureValues, Span<double> x)
    {
        var n = FeatureCount;
        Span<double> values = n <= 64 ? stackalloc double[n] : new double[n];
        Span<int> levels = n <= 64 ? stackalloc int[n] : new int[n];
        BindDense(featureValues, values, levels);
        var warningCount = 0;
        var error = Resolve(values, levels, default, ref warningCount);
        return error.IsError ? error : Design(values, levels, x);
    }

    internal ScoredRow ScoreBound(Span<double> values, Span<int> levels, in ScoreSettings settings, Span<double> contributions, Span<RowWarning> warnings, int warningCount)
    {
        var error = Resolve(values, levels, warnings, ref warningCount);
        if (error.IsError)
        {
            return FailedRow(error);
        }

        var k = TermCount;
        Span<double> x = k <= 256 ? stackalloc double[k] : new double[k];
        error = Design(values, levels, x);
        if (error.IsError)
        {
            return FailedRow(error);
        }

        var r = Finish(x, settings, contributions, warnings, warningCount);
        if (r.Error.Kind == RowErrorKind.Overflow)
        {
            r.Error = BlameOverflow(values);
        }

        return r;
    }

    /// <summary>
    /// The overflow error naming the used numeric feature furthest outside its training range (in range widths): with
    /// finite inputs only such a value can make η or x'Vx overflow.
    /// </summary>
    internal RowError BlameOverflow(ReadOnlySpan<double> values)
    {
        var blamed = -1;
        var furthest = -1.0;
        for (var f = 0; f < values.Length; f++)
        {
            var v = values[f];
            if (!Used[f] || Kinds[f] != FeatureKind.Numeric || !double.IsFinite(v))
            {
                continue;
            }

            var width = Max[f] - Min[f];
            var outside = Math.Max(Min[f] - v, v - Max[f]) / (width > 0 ? width : 1);
            if (outside > furthest)
            {
                furthest = outside;
                blamed = f;
            }
        }

        return new RowError(RowErrorKind.Overflow, blamed, blamed >= 0 ? values[blamed] : double.NaN);
    }

    /// <summary>Maps named values onto feature slots: values[f] (NaN = missing) and levels[f] (level index, Missing or Unknown).</summary>
    internal RowError Bind(ReadOnlySpan<NamedValue> row, Span<double> values, Span<int> levels, Span<RowWarning> warnings, ref int warningCount)
    {
        values.Fill(double.NaN);
        levels.Fill(int.MinValue); // not seen yet
        var names = FeatureNames.AsSpan();
        for (var i = 0; i < row.Length; i++)
        {
            ref readonly var nv = ref row[i];

            // Rows usually arrive with the model's feature order; try that position first.
            var f = (uint)i < (uint)names.Length && string.Equals(names[i], nv.Name, StringComparison.Ordinal) ? i : FeatureIndexOf(nv.Name);
            if (f < 0)
            {
                continue;
            }

            if (levels[f] != int.MinValue)
            {
                return new RowError(RowErrorKind.DuplicateFeature, f);
            }

            levels[f] = Missing;
            var v = nv.Value;
            if (Kinds[f] == FeatureKind.Numeric)
            {
                switch (v.Kind)
                {
                    case FeatureValueKind.Number:
                        if (!double.IsFinite(v.Number))
                        {
                            return new RowError(RowErrorKind.NotFinite, f, v.Number);
                        }

                        values[f] = v.Number;
                        break;
                    case FeatureValueKind.Text:
                        return new RowError(RowErrorKind.ExpectedNumber, f, Text: v.Text);
                    default:
                        break;
                }
            }
            else
            {
                switch (v.Kind)
                {
                    case FeatureValueKind.Text:
                        if (LevelIndex[f]!.TryGetValue(v.Text!, out var level))
                        {
                            levels[f] = level;
                        }
                        else if (UnknownAsReference[f])
                        {
                            levels[f] = ReferenceIndex[f];
                            AddWarning(warnings, ref warningCount, new RowWarning(RowWarningKind.UnknownLevelAsReference, f, double.NaN, double.NaN, v.Text));
                        }
                        else
                        {
                            return new RowError(RowErrorKind.UnknownLevel, f, Text: v.Text);
                        }

                        break;
                    case FeatureValueKind.Number:
                        if (NumericLevelIndex[f] is { } map && map.TryGetValue(v.Number, out var nl))
                        {
                            levels[f] = nl;
                        }
                        else
                        {
                            return new RowError(RowErrorKind.ExpectedLevel, f, v.Number);
                        }

                        break;
                    default:
                        break;
                }
            }
        }

        for (var f = 0; f < levels.Length; f++)
        {
            if (levels[f] == int.MinValue)
            {
                levels[f] = Missing;
            }
        }

        return default;
    }

    internal void BindDense(ReadOnlySpan<double> featureValues, Span<double> values, Span<int> levels)
    {
        for (var f = 0; f < values.Length; f++)
        {
            var v = featureValues[f];
            if (Kinds[f] == FeatureKind.Numeric)
            {
                values[f] = v;
                levels[f] = Missing;
            }
            else
            {
                values[f] = double.NaN;
                levels[f] = double.IsNaN(v) ? Missing
                    : v >= 0 && v < LevelNames[f].Length && v == Math.Floor(v) ? (int)v
                    : Unknown;
                if (levels[f] == Unknown)
                {
                    values[f] = v;
                }
            }
        }
    }

    /// <summary>Applies the model file's policies for missing values, unknown levels and the training range.</summary>
    internal RowError Resolve(Span<double> values, Span<int> levels, Span<RowWarning> warnings, ref int warningCount)
    {
        for (var f = 0; f < values.Length; f++)
        {
            if (!Used[f])
            {
                continue;
            }

            if (Kinds[f] == FeatureKind.Numeric)
            {
                var v = values[f];
                if (double.IsNaN(v))
                {
                    if (!ImputeMean[f])
                    {
                        return new RowError(RowErrorKind.MissingValue, f);
                    }

                    values[f] = Mean[f];
                    AddWarning(warnings, ref warningCount, new RowWarning(RowWarningKind.MissingImputed, f, Mean[f], double.NaN));
                }
                else if (!double.IsFinite(v))
                {
                    return new RowError(RowErrorKind.NotFinite, f, v);
                }
                else if (v < Min[f])
                {
                    AddWarning(warnings, ref warningCount, new RowWarning(RowWarningKind.BelowTrainingRange, f, v, Min[f]));
                }
                else if (v > Max[f])
                {
                    AddWarning(warnings, ref warningCount, new RowWarning(RowWarningKind.AboveTrainingRange, f, v, Max[f]));
                }
            }
            else
            {
                var l = levels[f];
                if (l == Missing)
                {
                    return new RowError(RowErrorKind.MissingValue, f);
                }

                if (l == Unknown)
                {
                    // Only the dense path leaves Unknown here: the value is a level code outside the levels.
                    if (!UnknownAsReference[f])
                    {
                        return new RowError(RowErrorKind.UnknownLevel, f, values[f], Code(values[f]));
                    }

                    levels[f] = ReferenceIndex[f];
                    AddWarning(warnings, ref warningCount, new RowWarning(RowWarningKind.UnknownLevelAsReference, f, values[f], double.NaN, Code(values[f])));
                }
            }
        }

        return default;

        static string Code(double v) => "level code " + v.ToString("R", System.Globalization.CultureInfo.InvariantCulture);
    }

    /// <summary>Builds the design row x from resolved feature values.</summary>
    internal RowError Design(ReadOnlySpan<double> values, ReadOnlySpan<int> levels, Span<double> x)
    {
        var cols = ColFeature.Length;
        var size = cols + IndicatorFeature.Length;
        Span<double> col = size <= 256 ? stackalloc double[size] : new double[size];
        for (var c = 0; c < cols; c++)
        {
            var f = ColFeature[c];
            var v = values[f];
            double t;
            switch (ColTransform[c])
            {
                case TransformKind.Identity:
                    t = v;
                    break;
                case TransformKind.Log:
                    if (!(v > 0))
                    {
                        return new RowError(RowErrorKind.OutsideTransformDomain, f, v, "log needs a value above 0");
                    }

                    t = Math.Log(v);
                    break;
                case TransformKind.Log1P:
                    if (!(v > -1))
                    {
                        return new RowError(RowErrorKind.OutsideTransformDomain, f, v, "log1p needs a value above -1");
                    }

                    t = Numerics.Elementary.Log1P(v);
                    break;
                default:
                    if (!(v >= 0))
                    {
                        return new RowError(RowErrorKind.OutsideTransformDomain, f, v, "sqrt needs a value of 0 or more");
                    }

                    t = Math.Sqrt(v);
                    break;
            }

            col[c] = (t - ColCenter[c]) / ColScale[c];
        }

        for (var i = 0; i < IndicatorFeature.Length; i++)
        {
            col[cols + i] = levels[IndicatorFeature[i]] == IndicatorLevel[i] ? 1.0 : 0.0;
        }

        var refs = FactorRef;
        var starts = TermStart;
        for (var j = 0; j < x.Length; j++)
        {
            int p = starts[j], end = starts[j + 1];
            if (end - p == 1)
            {
                x[j] = col[refs[p]];
                continue;
            }

            var value = 1.0;
            for (; p < end; p++)
            {
                value *= col[refs[p]];
            }

            x[j] = value;
        }

        return default;
    }

    /// <summary>η, se, probability, band, flag and contributions of a design row.</summary>
    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    private ScoredRow Finish(ReadOnlySpan<double> x, in ScoreSettings settings, Span<double> contributions, Span<RowWarning> warnings, int warningCount)
    {
        var beta = Beta.AsSpan(0, x.Length);
        var eta = Kernels.Dot(beta, x);

        if (contributions.Length >= beta.Length)
        {
            var origin = ContributionOrigin;
            for (var j = 0; j < beta.Length; j++)
            {
                contributions[j] = beta[j] * (x[j] - origin[j]);
            }
        }

        var quadratic = settings.Band && Factor is not null ? QuadraticForm(x) : double.NaN;
        return FinishFrom(eta, quadratic, settings, warnings, warningCount);
    }

    /// <summary>Probability, band, delta-method se and flag from η and x'Vx (NaN when there is no band).</summary>
    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    private ScoredRow FinishFrom(double eta, double quadratic, in ScoreSettings settings, Span<RowWarning> warnings, int warningCount)
    {
        var band = settings.Band && Factor is not null;
        if (!double.IsFinite(eta) || (band && !double.IsFinite(quadratic)))
        {
            // Finite inputs so large that η or x'Vx leaves double precision: no number here would mean anything.
            return FailedRow(new RowError(RowErrorKind.Overflow, -1));
        }

        var link = Link;
        ScoredRow r;
        r.Eta = eta;
        r.Probability = Links.Link.Inverse(link, eta);
        r.Flag = double.IsNaN(Threshold) ? (sbyte)-1 : r.Probability >= Threshold ? (sbyte)1 : (sbyte)0;
        r.Error = default;
        if (band)
        {
            var se = Math.Sqrt(quadratic);
            var half = settings.Z * se;
            r.Se = se;
            r.Lower = Links.Link.Inverse(link, eta - half);
            r.Upper = Links.Link.Inverse(link, eta + half);
            r.ProbabilitySe = Links.Link.Derivative(link, eta) * se;
            if (se > MaxSe * (1 + 1e-9))
            {
                AddWarning(warnings, ref warningCount, new RowWarning(RowWarningKind.HiddenExtrapolation, -1, se, MaxSe));
            }
        }
        else
        {
            r.Se = r.Lower = r.Upper = r.ProbabilitySe = double.NaN;
        }

        r.WarningCount = warningCount;
        return r;
    }

    /// <summary>
    /// Which contributions a result lists, in which order (the one rule every transport follows): the terms that vary
    /// between rows only (never the intercept); <paramref name="top"/> 0 lists them all in term order, N &gt; 0 the N
    /// largest by absolute value (ties in term order). Writes term indices into <paramref name="order"/> (length at
    /// least <see cref="TermCount"/>) and returns how many.
    /// </summary>
    public int OrderContributions(ReadOnlySpan<double> contributions, int top, Span<int> order)
    {
        var varying = VaryingTerms.AsSpan();
        varying.CopyTo(order);
        var count = varying.Length;
        if (top <= 0)
        {
            return top < 0 ? 0 : count;
        }

        // Selection of the largest N, O(terms × N) without allocation: at each place the largest |value| left, the
        // lowest term index among equal ones, so ties keep term order.
        var listed = Math.Min(top, count);
        for (var t = 0; t < listed; t++)
        {
            var best = t;
            var bestSize = Math.Abs(contributions[order[t]]);
            for (var i = t + 1; i < count; i++)
            {
                var size = Math.Abs(contributions[order[i]]);
                if (size > bestSize || (size == bestSize && order[i] < order[best]))
                {
                    best = i;
                    bestSize = size;
                }
            }

            (order[t], order[best]) = (order[best], order[t]);
        }

        return listed;
    }

    /// <summary>x'Vx as |Fᵀx|², F the covariance factor, accumulated row by row (rows where x_i = 0 cost nothing).</summary>
    internal double QuadraticForm(ReadOnlySpan<double> x)
    {
        var k = x.Length;
        Span<double> u = k <= 256 ? stackalloc double[k] : new double[k];
        u.Clear();
        var factor = Factor!;
        var start = FactorRowStart!;
        for (var i = 0; i < k; i++)
        {
            var xi = x[i];
            if (xi != 0)
            {
                Kernels.MultiplyAdd(u, factor.AsSpan(start[i], start[i + 1] - start[i]), xi);
            }
        }

        return Kernels.SumOfSquares(u);
    }

    private static void AddWarning(Span<RowWarning> warnings, ref int count, in RowWarning w)
    {
        if (count < warnings.Length)
        {
            warnings[count] = w;
        }

        count++;
    }

    private static ScoredRow FailedRow(RowError error) => new()
    {
        Eta = double.NaN,
        Se = double.NaN,
        Probability = double.NaN,
        Lower = double.NaN,
        Upper = double.NaN,
        ProbabilitySe = double.NaN,
        Flag = -1,
        Error = error,
    };
}
