using System.Runtime.Intrinsics;
using MathNet.Numerics.LinearAlgebra;
using Scorer.Engine.Links;
using Scorer.ModelFile;

namespace Scorer.Fitting;

/// <summary>Settings of the IRLS iterations.</summary>
public sealed record FitSettings
{
    public LinkKind Link { get; init; } = LinkKind.Logit;

    /// <summary>Iteration cap. Default 100.</summary>
    public int MaxIterations { get; init; } = 100;

    /// <summary>Converged when |D − D_prev| / (|D| + 0.1) is below this. Default 1e-10.</summary>
    public double DevianceTolerance { get; init; } = 1e-10;

    /// <summary>…and every coefficient moved by less than this relative to max(|β_j|, 1). Default 1e-10.</summary>
    public double CoefficientTolerance { get; init; } = 1e-10;

    /// <summary>Rows per block of the cross-product accumulation; blocks are shared out over the cores. Default 8192.</summary>
    public int BlockRows { get; init; } = 8192;
}

/// <summary>The outcome of the iterations.</summary>
public sealed record IrlsResult
{
    public required double[] Beta { get; init; }

    /// <summary>Inverse of the Fisher information X'WX at the estimate, k × k; null when the information is singular.</summary>
    public required double[,]? Covariance { get; init; }

    public required double Deviance { get; init; }
    public required int Iterations { get; init; }
    public required bool Converged { get; init; }

    /// <summary>η of each row at the estimate (offset included).</summary>
    public required double[] Eta { get; init; }

    /// <summary>Coefficients after each iteration, for the separation diagnosis.</summary>
    public required IReadOnlyList<double[]> History { get; init; }

    /// <summary>Rows whose fitted probability is within 10·ε of 0 or 1.</summary>
    public required int FittedAtBoundary { get; init; }
}

/// <summary>
/// Iteratively reweighted least squares (Fisher scoring) for binary GLMs, as in R's glm.fit: start from
/// μ = (w·y + ½)/(w + 1), working response z = η − offset + (y − μ)/μ', weights W = w·μ'²/(μ(1 − μ)); solve
/// (X'WX)β = X'Wz by Cholesky (MathNet.Numerics); halve the step while the deviance rises or is not finite. X'WX and
/// X'Wz accumulate in blocks of rows shared out over the cores, each block into its own lower triangle.
/// </summary>
internal sealed class Irls(double[] x, int k, double[] y, double[] w, double[]? offset, FitSettings settings)
{
    private readonly int _n = y.Length;
    private readonly LinkKind _link = settings.Link;

    public IrlsResult Fit(IReadOnlyList<string> termNames)
    {
        var eta = new double[_n];
        for (var i = 0; i < _n; i++)
        {
            var mu0 = ((w[i] * y[i]) + 0.5) / (w[i] + 1);
            eta[i] = Link.Forward(_link, mu0);
        }

        var history = new List<double[]>();
        double[]? betaOld = null;
        var devOld = double.PositiveInfinity;
        var converged = false;
        var iterations = 0;
        double[] beta = new double[k];
        double dev = double.NaN;
        for (var iter = 1; iter <= settings.MaxIterations; iter++)
        {
            iterations = iter;
            var (a, b) = CrossProducts(eta);
            if (iter == 1)
            {
                Aliasing.Check(a, termNames);
            }

            if (!TrySolve(a, b, out beta))
            {
                if (betaOld is null)
                {
                    Aliasing.Check(a, termNames);
                    throw new FitException("", "the weighted cross-product matrix X'WX is not positive definite; some terms are (nearly) aliased");
                }

                // Weights collapsed as estimates ran off (separation, usually): stop and let the diagnosis speak.
                beta = betaOld;
                dev = devOld;
                break;
            }

            dev = Update(beta, eta);
            var halvings = 0;
            while (betaOld is not null && (!double.IsFinite(dev) || dev > devOld + (1e-12 * Math.Abs(devOld))) && halvings < 40)
            {
                for (var j = 0; j < k; j++)
                {
                    beta[j] = 0.5 * (beta[j] + betaOld[j]);
                }

                dev = Update(beta, eta);
                halvings++;
            }

            if (!double.IsFinite(dev))
            {
                throw new FitException("", "the deviance is not finite even after halving the step; the data cannot be fitted with this link (try another link, or look for separation)");
            }

            history.Add((double[])beta.Clone());
            if (betaOld is not null)
            {
                var devChange = Math.Abs(dev - devOld) / (Math.Abs(dev) + 0.1);
                var step = 0.0;
                for (var j = 0; j < k; j++)
                {
                    step = Math.Max(step, Math.Abs(beta[j] - betaOld[j]) / Math.Max(Math.Abs(beta[j]), 1.0));
                }

                if (devChange < settings.DevianceTolerance && step < settings.CoefficientTolerance)
                {
                    converged = true;
                    break;
                }
            }

            betaOld = (double[])beta.Clone();
            devOld = dev;
        }

        // Inverse Fisher information at the estimate (null when singular).
        var (info, _) = CrossProducts(eta);
        var covariance = TryInvert(info);
        var boundary = 0;
        const double eps = 10 * 2.220446049250313e-16; // R's glm.fit: 10 × .Machine$double.eps
        for (var i = 0; i < _n; i++)
        {
            var mu = Link.Inverse(_link, eta[i]);
            if (mu < eps || mu > 1 - eps)
            {
                boundary++;
            }
        }

        return new IrlsResult
        {
            Beta = beta,
            Covariance = covariance,
            Deviance = dev,
            Iterations = iterations,
            Converged = converged,
            Eta = eta,
            History = history,
            FittedAtBoundary = boundary,
        };
    }

    /// <summary>Binomial deviance of binary y at η: −2 Σ w [y ln μ + (1 − y) ln(1 − μ)], logs taken from η directly.</summary>
    public static double Deviance(LinkKind link, double[] eta, double[] y, double[] w)
    {
        var parts = new double[2];
        Parallel.For(0, 2, part =>
        {
            var (lo, hi) = Half(part, y.Length);
            var sum = 0.0;
            for (var i = lo; i < hi; i++)
            {
                if (w[i] == 0)
                {
                    continue;
                }

                sum += w[i] * (y[i] > 0.5 ? Link.LogInverse(link, eta[i]) : Link.LogComplement(link, eta[i]));
            }

            parts[part] = -2 * sum;
        });
        return parts[0] + parts[1];
    }

    private double Update(double[] beta, double[] eta)
    {
        Parallel.For(0, 2, part =>
        {
            var (lo, hi) = Half(part, _n);
            for (var i = lo; i < hi; i++)
            {
                var row = x.AsSpan(i * k, k);
                var e = offset?[i] ?? 0.0;
                for (var j = 0; j < k; j++)
                {
                    e += row[j] * beta[j];
                }

                eta[i] = e;
            }
        });
        return Deviance(_link, eta, y, w);
    }

    /// <summary>
    /// X'WX (lower triangle filled, then mirrored) and X'Wz, with the IRLS weights at η. Rows where μ' or μ(1 − μ) underflow to 0 carry no information and are left out, as R's glm.fit does.
    /// </summary>
    private (double[,] A, double[] B) CrossProducts(double[] eta)
    {
        var blocks = (_n + settings.BlockRows - 1) / settings.BlockRows;
        var partials = new (double[] A, double[] B)[Math.Min(blocks, Environment.ProcessorCount)];
        var next = -1;
        Parallel.For(0, partials.Length, part =>
        {
            var a = new double[k * k];
            var b = new double[k];
            int block;
            while ((block = Interlocked.Increment(ref next)) < blocks)
            {
                var lo = block * settings.BlockRows;
                var hi = Math.Min(_n, lo + settings.BlockRows);
                for (var i = lo; i < hi; i++)
                {
                    if (w[i] == 0)
                    {
                        continue;
                    }

                    var e = eta[i];
                    var mu = Link.Inverse(_link, e);
                    var variance = mu * Link.Complement(_link, e);
                    var d = Link.Derivative(_link, e);
                    if (d == 0 || variance == 0)
                    {
                        continue;
                    }

                    var weight = w[i] * d * d / variance;
                    var z = e - (offset?[i] ?? 0.0) + ((y[i] - mu) / d);
                    var row = x.AsSpan(i * k, k);
                    for (var r = 0; r < k; r++)
                    {
                        var t = weight * row[r];
                        if (t == 0)
                        {
                            continue;
                        }

                        b[r] += t * z;
                        MultiplyAdd(a.AsSpan(r * k, r + 1), row[..(r + 1)], t);
                    }
                }
            }

            partials[part] = (a, b);
        });

        var sumA = new double[k, k];
        var sumB = new double[k];
        foreach (var (a, b) in partials)
        {
            if (a is null)
            {
                continue;
            }

            for (var r = 0; r < k; r++)
            {
                sumB[r] += b[r];
                for (var c = 0; c <= r; c++)
                {
                    sumA[r, c] += a[(r * k) + c];
                }
            }
        }

        for (var r = 0; r < k; r++)
        {
            for (var c = r + 1; c < k; c++)
            {
                sumA[r, c] = sumA[c, r];
            }
        }

        return (sumA, sumB);
    }

    private static bool TrySolve(double[,] a, double[] b, out double[] beta)
    {
        try
        {
            beta = Matrix<double>.Build.DenseOfArray(a).Cholesky().Solve(Vector<double>.Build.DenseOfArray(b)).ToArray();
            return beta.All(double.IsFinite);
        }
        catch (ArgumentException)
        {
            beta = [];
            return false;
        }
    }

    private double[,]? TryInvert(double[,] a)
    {
        try
        {
            var result = Matrix<double>.Build.DenseOfArray(a).Cholesky().Solve(Matrix<double>.Build.DenseIdentity(k)).ToArray();
            for (var r = 0; r < k; r++)
            {
                for (var c = r + 1; c < k; c++)
                {
                    var s = 0.5 * (result[r, c] + result[c, r]);
                    result[r, c] = s;
                    result[c, r] = s;
                }
            }

            return result;
        }
        catch (ArgumentException)
        {
            return null;
        }
    }

    private static void MultiplyAdd(Span<double> acc, ReadOnlySpan<double> row, double t)
    {
        var j = 0;
        if (Vector512.IsHardwareAccelerated)
        {
            var tv = Vector512.Create(t);
            for (; j + 8 <= row.Length; j += 8)
            {
                Vector512.FusedMultiplyAdd(Vector512.Create(row.Slice(j, 8)), tv, Vector512.Create((ReadOnlySpan<double>)acc.Slice(j, 8))).CopyTo(acc.Slice(j, 8));
            }
        }
        else if (Vector256.IsHardwareAccelerated)
        {
            var tv = Vector256.Create(t);
            for (; j + 4 <= row.Length; j += 4)
            {
                Vector256.FusedMultiplyAdd(Vector256.Create(row.Slice(j, 4)), tv, Vector256.Create((ReadOnlySpan<double>)acc.Slice(j, 4))).CopyTo(acc.Slice(j, 4));
            }
        }

        for (; j < row.Length; j++)
        {
            acc[j] += row[j] * t;
        }
    }

    private static (int Lo, int Hi) Half(int part, int n) => part == 0 ? (0, n / 2) : (n / 2, n);
}
