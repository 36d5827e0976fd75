using System.Globalization;
using System.Text.Json;
using Scorer.Statistics.Sequential;
using Scorer.Testing;

namespace Scorer.Statistics.Tests.Sequential;

/// <summary>One reference case written by tests/reference/calibration (statistics.py): the rows of out/&lt;case&gt;.csv
/// and the fields of out/&lt;case&gt;.json.</summary>
internal sealed class ReferenceCase
{
    public static readonly string[] Names = ["pima-logit", "pima-miscalibrated", "pima-cloglog", "birthwt-probit"];

    private static readonly Dictionary<string, ReferenceCase> Loaded = [];

    private readonly JsonElement _json;

    private ReferenceCase(string name)
    {
        var lines = File.ReadAllLines(TestRepository.CalibrationFile(name + ".csv"));
        Assert.Equal("p,y,eta", lines[0]);
        var rows = lines.Skip(1).Where(l => l.Length > 0).Select(l => l.Split(',')).ToArray();
        Probabilities = rows.Select(r => double.Parse(r[0], CultureInfo.InvariantCulture)).ToArray();
        Outcomes = rows.Select(r => byte.Parse(r[1], CultureInfo.InvariantCulture)).ToArray();
        using var document = JsonDocument.Parse(File.ReadAllText(TestRepository.CalibrationFile(name + ".json")));
        _json = document.RootElement.Clone();
    }

    public double[] Probabilities { get; }

    public byte[] Outcomes { get; }

    public static ReferenceCase Load(string name)
    {
        lock (Loaded)
        {
            if (!Loaded.TryGetValue(name, out var found))
            {
                found = new ReferenceCase(name);
                Loaded[name] = found;
            }

            return found;
        }
    }

    public double Number(string field) => _json.GetProperty(field).GetDouble();

    public double[] Numbers(string field) => _json.GetProperty(field).EnumerateArray().Select(e => e.GetDouble()).ToArray();
}

/// <summary>
/// An invented population of predicted probabilities with about a 15% event rate: the 2,000 quantiles at
/// (i + ½)/2000 of a Kumaraswamy(2, 35) law, a Beta-like law on [0, 1] with the closed-form quantile
/// (1 − (1 − u)^(1/b))^(1/a) (Kumaraswamy 1980, from memory). Its mean is about 0.148; it peaks near 0.12 and has a
/// right tail to about 0.5. Deterministic, so every test sees the same sample.
/// </summary>
internal static class InventedPopulation
{
    public const double TargetInControlRunLength = 2_000;

    public static double[] Probabilities { get; } = Make(2_000, 2.0, 35.0);

    /// <summary>The upward chart's threshold for ARL₀ = 2,000 on this population, computed once for all tests.</summary>
    public static ThresholdChoice UpwardFor2000 => LazyUpward.Value;

    private static readonly Lazy<ThresholdChoice> LazyUpward =
        new(() => RunLength.ThresholdFor(Probabilities, 2.0, TargetInControlRunLength));

    private static double[] Make(int n, double a, double b)
    {
        var p = new double[n];
        for (var i = 0; i < n; i++)
        {
            var u = (i + 0.5) / n;
            p[i] = Math.Pow(1.0 - Math.Pow(1.0 - u, 1.0 / b), 1.0 / a);
        }

        return p;
    }
}

/// <summary>A seeded stream of (p, y) pairs: p drawn uniformly from a population, y ~ Bernoulli(p₁) where p₁ has the
/// model's odds multiplied by the current true odds ratio.</summary>
internal sealed class SimulatedStream(double[] population, int seed)
{
    private readonly SeededRandom _random = new(seed);

    public double TrueOddsRatio { get; set; } = 1.0;

    public (double P, byte Y) Next()
    {
        var p = population[_random.NextIndex(population.Length)];
        var r = TrueOddsRatio;
        var p1 = r == 1.0 ? p : r * p / (1.0 - p + (r * p));
        return (p, _random.NextDouble() < p1 ? (byte)1 : (byte)0);
    }
}

/// <summary>Mean and standard error of a sample, accumulated one value at a time (Welford).</summary>
internal sealed class RunningMean
{
    private double _sumSquares;

    public long Count { get; private set; }

    public double Mean { get; private set; }

    public double StandardError => Math.Sqrt(_sumSquares / (Count - 1) / Count);

    public void Add(double x)
    {
        Count++;
        var delta = x - Mean;
        Mean += delta / Count;
        _sumSquares += delta * (x - Mean);
    }
}
