using MathNet.Numerics.LinearAlgebra;
using Scorer.Engine.Links;
using Scorer.ModelFile;

namespace PumpBearings.Generator;

/// <summary>The result of a binary GLM fit: estimates, their covariance (X'WX)⁻¹ at the optimum, and fit statistics.</summary>
internal sealed record FitResult(
    double[] Coefficients,
    double[,] Covariance,
    int Iterations,
    bool Converged,
    double Deviance,
    double NullDeviance);

/// <summary>
/// Demo-only fitter for binary GLMs by iteratively reweighted least squares (Fisher scoring): working weights
/// w = (dμ/dη)² / (μ(1 − μ)), working response z = η + (y − μ)/(dμ/dη), each step solving X'WX β = X'Wz by Cholesky.
/// For the logit link this is Newton-Raphson. Stops when the relative change of the deviance is below 1e-12.
/// </summary>
internal static class Irls
{
    private const double Tolerance = 1e-12;
    private const int MaxIterations = 100;
    private const double Clamp = 1e-15;

    public static FitResult Fit(Matrix<double> x, double[] y, LinkKind link, int interceptIndex)
    {
        var k = x.ColumnCount;
        var ybar = y.Average();

        // Start at the null model: the intercept at g(ȳ), every other coefficient at 0.
        var beta = Vector<double>.Build.Dense(k);
        beta[interceptIndex] = Link.Forward(link, ybar);
        var nullDeviance = -2 * y.Sum(yi => (yi * Math.Log(ybar)) + ((1 - yi) * Math.Log(1 - ybar)));

        var deviance = Deviance(x * beta, y, link);
        var iterations = 0;
        var converged = false;
        while (iterations < MaxIterations && !converged)
        {
            var eta = x * beta;
            var (w, z) = WorkingWeights(eta, y, link);
            var xw = ScaleRows(x, w);
            var xtwx = xw.TransposeThisAndMultiply(x);
            var xtwz = xw.TransposeThisAndMultiply(z);
            beta = xtwx.Cholesky().Solve(xtwz);
            iterations++;

            var next = Deviance(x * beta, y, link);
            converged = Math.Abs(next - deviance) < Tolerance * Math.Abs(next);
            deviance = next;
        }

        // Covariance (X'WX)⁻¹ with the weights at the optimum, made exactly symmetric.
        var (wFinal, _) = WorkingWeights(x * beta, y, link);
        var information = ScaleRows(x, wFinal).TransposeThisAndMultiply(x);
        var v = information.Cholesky().Solve(Matrix<double>.Build.DenseIdentity(k));
        var covariance = new double[k, k];
        for (var i = 0; i < k; i++)
        {
            for (var j = 0; j < k; j++)
            {
                covariance[i, j] = 0.5 * (v[i, j] + v[j, i]);
            }
        }

        return new FitResult(beta.ToArray(), covariance, iterations, converged, deviance, nullDeviance);
    }

    private static (Vector<double> W, Vector<double> Z) WorkingWeights(Vector<double> eta, double[] y, LinkKind link)
    {
        var w = Vector<double>.Build.Dense(eta.Count);
        var z = Vector<double>.Build.Dense(eta.Count);
        for (var i = 0; i < eta.Count; i++)
        {
            var mu = Math.Clamp(Link.Inverse(link, eta[i]), Clamp, 1 - Clamp);
            var d = Math.Max(Link.Derivative(link, eta[i]), Clamp);
            w[i] = d * d / (mu * (1 - mu));
            z[i] = eta[i] + ((y[i] - mu) / d);
        }

        return (w, z);
    }

    private static Matrix<double> ScaleRows(Matrix<double> x, Vector<double> w)
    {
        var xw = x.Clone();
        xw.MapIndexedInplace((i, _, value) => value * w[i]);
        return xw;
    }

    private static double Deviance(Vector<double> eta, double[] y, LinkKind link)
    {
        var sum = 0.0;
        for (var i = 0; i < y.Length; i++)
        {
            var mu = Math.Clamp(Link.Inverse(link, eta[i]), Clamp, 1 - Clamp);
            sum += y[i] > 0.5 ? Math.Log(mu) : Math.Log(1 - mu);
        }

        return -2 * sum;
    }
}
