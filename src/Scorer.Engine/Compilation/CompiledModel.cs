using System.Collections.Frozen;
using System.Collections.Immutable;
using System.Globalization;
using MathNet.Numerics.LinearAlgebra;
using Scorer.ModelFile;

namespace Scorer.Engine;

/// <summary>
/// A model version compiled once into dense arrays: feature lookup, the numeric columns (transformed, centred, scaled
/// values), the terms as products of columns and indicators, the coefficients (prior-corrected), and a factor F of the
/// covariance with V = F·Fᵀ (upper-triangular Cholesky factor when V is positive definite). Immutable and thread-safe.
/// </summary>
public sealed partial class CompiledModel
{
    internal const int Missing = -1;
    internal const int Unknown = -2;

    private readonly FrozenDictionary<string, int> _featureIndex;

    // Features, by model feature index.
    internal readonly FeatureKind[] Kinds;
    internal readonly double[] Min;
    internal readonly double[] Max;
    internal readonly bool[] ImputeMean;
    internal readonly double[] Mean;
    internal readonly FrozenDictionary<string, int>?[] LevelIndex;
    internal readonly Dictionary<double, int>?[] NumericLevelIndex;
    internal readonly string[][] LevelNames;
    internal readonly int[] ReferenceIndex;
    internal readonly bool[] UnknownAsReference;
    internal readonly bool[] Used; // by at least one term; an unused feature never rejects a row

    // Numeric columns: distinct (feature, transform, center, scale).
    internal readonly int[] ColFeature;
    internal readonly TransformKind[] ColTransform;
    internal readonly double[] ColCenter;
    internal readonly double[] ColScale;

    // Terms: factors in FactorRef[TermStart[t] .. TermStart[t+1]), each an index into the row's value table: numeric
    // columns first (0 .. columns-1), then indicators (columns + i). A term's value is the product of its entries.
    internal readonly int[] TermStart;
    internal readonly int[] FactorRef;
    internal readonly int[] IndicatorFeature;
    internal readonly int[] IndicatorLevel;

    internal readonly double[] Beta;

    // The value each term's contribution is measured from: its training mean (baseline.term_means), or 0.
    internal readonly double[] ContributionOrigin;

    // Covariance factor F with V = F·Fᵀ, by rows: row i holds F[i, 0 .. len_i) packed from FactorRowStart[i]
    // (len_i = i + 1 for the Cholesky factor, k otherwise). Fᵀx accumulates row by row: u[0..len_i) += F[i, ·]·x_i,
    // and x'Vx = |u|².
    internal readonly double[]? Factor;
    internal readonly int[]? FactorRowStart;

    // The same factor transposed, for the block kernel: row j holds Fᵀ[j, FactorTFirst[j] .. k) packed from
    // FactorTStart[j] (FactorTFirst[j] = j for the Cholesky factor, 0 otherwise), so u_j = Σ_i Fᵀ[j, i]·x_i.
    internal readonly double[]? FactorT;
    internal readonly int[]? FactorTStart;
    internal readonly int[]? FactorTFirst;

    internal CompiledModel(ModelDocument document)
    {
        Document = document;
        var features = document.Features;
        var n = features.Length;
        FeatureNames = features.Select(f => f.Name).ToImmutableArray();
        TermNames = document.Terms.Select(t => t.Name).ToImmutableArray();
        _featureIndex = features.Select((f, i) => KeyValuePair.Create(f.Name, i)).ToFrozenDictionary(StringComparer.Ordinal);

        Kinds = features.Select(f => f.Kind).ToArray();
        Min = features.Select(f => f.Min ?? double.NegativeInfinity).ToArray();
        Max = features.Select(f => f.Max ?? double.PositiveInfinity).ToArray();
        ImputeMean = features.Select(f => f.Missing == MissingPolicy.Mean).ToArray();
        Mean = features.Select(f => f.Mean ?? double.NaN).ToArray();
        LevelNames = features.Select(f => f.Levels.ToArray()).ToArray();
        LevelIndex = features.Select(f => f.Kind == FeatureKind.Categorical
            ? f.Levels.Select((l, i) => KeyValuePair.Create(l, i)).ToFrozenDictionary(StringComparer.Ordinal)
            : null).ToArray();
        NumericLevelIndex = features.Select(NumericLevels).ToArray();
        ReferenceIndex = features.Select(f => f.Reference is null ? Missing : f.Levels.IndexOf(f.Reference)).ToArray();
        UnknownAsReference = features.Select(f => f.Unknown == UnknownLevelPolicy.Reference).ToArray();
        var used = document.Terms.SelectMany(t => t.Factors).Select(x => x.Feature).ToHashSet(StringComparer.Ordinal);
        Used = features.Select(f => used.Contains(f.Name)).ToArray();

        // Distinct columns and indicators, each found by a lookup (not a search of the list: a wide model has hundreds).
        var columns = new List<(int Feature, TransformKind T, double C, double S)>();
        var columnIndex = new Dictionary<(int, TransformKind, double, double), int>();
        var indicators = new List<(int Feature, int Level)>();
        var indicatorIndex = new Dictionary<(int, int), int>();
        var termStart = new List<int> { 0 };
        var refs = new List<int>();
        foreach (var term in document.Terms)
        {
            foreach (var factor in term.Factors)
            {
                var f = _featureIndex[factor.Feature];
                if (factor.IsIndicator)
                {
                    var key = (f, LevelIndex[f]![factor.Level!]);
                    if (!indicatorIndex.TryGetValue(key, out var i))
                    {
                        indicators.Add(key);
                        i = indicators.Count - 1;
                        indicatorIndex.Add(key, i);
                    }

                    refs.Add(~i);
                }
                else
                {
                    var key = (f, factor.Transform, factor.Center, factor.Scale);
                    if (!columnIndex.TryGetValue(key, out var c))
                    {
                        columns.Add(key);
                        c = columns.Count - 1;
                        columnIndex.Add(key, c);
                    }

                    refs.Add(c);
                }
            }

            termStart.Add(refs.Count);
        }

        ColFeature = columns.Select(c => c.Feature).ToArray();
        ColTransform = columns.Select(c => c.T).ToArray();
        ColCenter = columns.Select(c => c.C).ToArray();
        ColScale = columns.Select(c => c.S).ToArray();
        IndicatorFeature = indicators.Select(i => i.Feature).ToArray();
        IndicatorLevel = indicators.Select(i => i.Level).ToArray();
        TermStart = termStart.ToArray();
        FactorRef = refs.Select(r => r >= 0 ? r : columns.Count + ~r).ToArray();

        Beta = document.Terms.Select(t => t.Coefficient).ToArray();
        InterceptIndex = document.Terms.IndexOf(document.Terms.FirstOrDefault(t => t.IsIntercept)!);
        if (document.Sampling is { } s && InterceptIndex >= 0)
        {
            InterceptCorrection = PriorCorrection(s);
            Beta[InterceptIndex] += InterceptCorrection;
        }

        if (document.Covariance is { } cov)
        {
            (Factor, FactorRowStart, FactorIsTriangular) = BuildFactor(cov);
            (FactorT, FactorTStart, FactorTFirst) = Transpose(Factor, FactorRowStart, FactorIsTriangular);
        }

        var means = document.Baseline?.TermMeans ?? System.Collections.Immutable.ImmutableDictionary<string, double>.Empty;
        ContributionsFromMeans = means.Count > 0;
        ContributionOrigin = document.Terms.Select(t => means.TryGetValue(t.Name, out var m) ? m : 0.0).ToArray();
        VaryingTerms = [.. Enumerable.Range(0, document.Terms.Length).Where(j => !document.Terms[j].IsIntercept)];

        MaxSe = document.Baseline?.MaxSe ?? double.PositiveInfinity;
        Threshold = document.Threshold ?? double.NaN;
    }

    public ModelDocument Document { get; }
    public string Name => Document.Model;
    public string Version => Document.Version;
    public LinkKind Link => Document.Link;
    public int TermCount => Beta.Length;
    public int FeatureCount => Kinds.Length;
    public ImmutableArray<string> FeatureNames { get; }
    public ImmutableArray<string> TermNames { get; }
    public bool HasCovariance => Factor is not null;

    /// <summary>True when the covariance is positive definite and its factor is the (upper) Cholesky factor.</summary>
    public bool FactorIsTriangular { get; }

    /// <summary>Index of the intercept term, or -1.</summary>
    public int InterceptIndex { get; }

    /// <summary>The shift added to the intercept at load by the prior correction (0 without <c>sampling</c>).</summary>
    public double InterceptCorrection { get; }

    /// <summary>The coefficients as scored (the intercept prior-corrected).</summary>
    public ReadOnlySpan<double> Coefficients => Beta;

    /// <summary>
    /// The terms whose value varies between rows (every term but the intercept), in term order: the only ones
    /// contributions list and rank.
    /// </summary>
    public ImmutableArray<int> VaryingTerms { get; }

    /// <summary>
    /// True when the model file gives the training mean of every term (baseline.term_means): a contribution is then
    /// β_j (x_j − x̄_j), how far this row's term moves η from a typical row's; otherwise β_j x_j.
    /// </summary>
    public bool ContributionsFromMeans { get; }

    /// <summary>Largest training se(η), or +∞ when the baseline does not give it.</summary>
    public double MaxSe { get; }

    /// <summary>Decision threshold, or NaN.</summary>
    public double Threshold { get; }

    /// <summary>The largest number of warnings a row can get.</summary>
    public int MaxWarningsPerRow => FeatureCount + 1;

    /// <summary>
    /// Compiles a valid document. One read from a file is valid already; one built in code is first checked by every
    /// rule of the model file (<see cref="ModelFileException"/> lists what is wrong).
    /// </summary>
    public static CompiledModel Compile(ModelDocument document)
    {
        ModelFileReader.EnsureValid(document);
        return new CompiledModel(document);
    }

    /// <summary>Index of a feature by name, or -1.</summary>
    public int FeatureIndexOf(string name) => _featureIndex.TryGetValue(name, out var i) ? i : -1;

    /// <summary>
    /// The model's own string for a feature name given as characters (so a caller reading JSON need not allocate one),
    /// or null when the model has no such feature.
    /// </summary>
    public string? FeatureName(ReadOnlySpan<char> name)
    {
        var f = FeatureIndexOf(name);
        return f >= 0 ? FeatureNames[f] : null;
    }

    /// <summary>Index of a feature by name given as characters, or -1.</summary>
    public int FeatureIndexOf(ReadOnlySpan<char> name) =>
        _featureIndex.GetAlternateLookup<ReadOnlySpan<char>>().TryGetValue(name, out var i) ? i : -1;

    /// <summary>The model's own string for a level of a categorical feature given as characters, or null when unknown.</summary>
    public string? LevelName(int feature, ReadOnlySpan<char> level) =>
        LevelIndex[feature] is { } index && index.GetAlternateLookup<ReadOnlySpan<char>>().TryGetValue(level, out var i) ? LevelNames[feature][i] : null;

    public FeatureKind FeatureKindOf(int feature) => Kinds[feature];

    public IReadOnlyList<string> Levels(int feature) => LevelNames[feature];

    public string? ReferenceLevel(int feature) => ReferenceIndex[feature] >= 0 ? LevelNames[feature][ReferenceIndex[feature]] : null;

    /// <summary>King &amp; Zeng (2001) prior correction: −ln[((1−τ)/τ)·(ȳ/(1−ȳ))].</summary>
    internal static double PriorCorrection(SamplingSpec s)
    {
        var tau = s.PopulationEventRate;
        var ybar = s.TrainingEventRate;
        return -Math.Log((1 - tau) / tau * (ybar / (1 - ybar)));
    }

    private static Dictionary<double, int>? NumericLevels(FeatureSpec f)
    {
        if (f.Kind != FeatureKind.Categorical)
        {
            return null;
        }

        // Levels written as numbers ("1", "2.5") also match a JSON number in a row.
        var map = new Dictionary<double, int>();
        for (var i = 0; i < f.Levels.Length; i++)
        {
            if (double.TryParse(f.Levels[i], NumberStyles.Float, CultureInfo.InvariantCulture, out var d)
                && d.ToString("R", CultureInfo.InvariantCulture) == f.Levels[i])
            {
                map.TryAdd(d, i);
            }
        }

        return map.Count > 0 ? map : null;
    }

    private static (double[], int[], bool) BuildFactor(ImmutableArray<ImmutableArray<double>> cov)
    {
        var k = cov.Length;
        var v = Matrix<double>.Build.Dense(k, k, (i, j) => 0.5 * (cov[i][j] + cov[j][i]));
        var start = new int[k + 1];
        try
        {
            // V = L·Lᵀ, L lower triangular: row i holds L[i, 0..i].
            var l = v.Cholesky().Factor;
            var packed = new double[k * (k + 1) / 2];
            var p = 0;
            for (var i = 0; i < k; i++)
            {
                start[i] = p;
                for (var j = 0; j <= i; j++)
                {
                    packed[p++] = l[i, j];
                }
            }

            start[k] = p;
            return (packed, start, true);
        }
        catch (ArgumentException)
        {
            // Only semi-definite (the loader has checked that much): V = Q·Λ·Qᵀ, F = Q·Λ^½.
        }

        var evd = v.Evd(Symmetricity.Symmetric);
        var full = new double[k * k];
        for (var i = 0; i < k; i++)
        {
            start[i] = i * k;
            for (var j = 0; j < k; j++)
            {
                full[(i * k) + j] = evd.EigenVectors[i, j] * Math.Sqrt(Math.Max(evd.EigenValues[j].Real, 0.0));
            }
        }

        start[k] = k * k;
        return (full, start, false);
    }

    private static (double[], int[], int[]) Transpose(double[] factor, int[] rowStart, bool triangular)
    {
        var k = rowStart.Length - 1;
        var start = new int[k + 1];
        var first = new int[k];
        var t = new double[factor.Length];
        var p = 0;
        for (var j = 0; j < k; j++)
        {
            start[j] = p;
            first[j] = triangular ? j : 0;
            for (var i = first[j]; i < k; i++)
            {
                // F[i, j] exists when j < length of row i.
                t[p++] = j < rowStart[i + 1] - rowStart[i] ? factor[rowStart[i] + j] : 0.0;
            }
        }

        start[k] = p;
        return (t, start, first);
    }
}
