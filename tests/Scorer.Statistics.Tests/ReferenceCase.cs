using System.Globalization;
using System.Text.Json;
using Scorer.Testing;

namespace Scorer.Statistics.Tests;

/// <summary>
/// One case of tests/reference/calibration/out: the rows of &lt;case&gt;.csv (p, y, eta in prediction-time order, 17
/// significant digits so they read back as R's doubles) and the reference values of &lt;case&gt;.json, written by R
/// (glm, pROC, quantile/cut, pchisq) and Python (sklearn, statsmodels, scipy); README.md there names each field's source.
/// </summary>
internal sealed class ReferenceCase
{
    public static readonly TheoryData<string> Names = new() { "pima-logit", "pima-miscalibrated", "pima-cloglog", "birthwt-probit" };

    private static readonly Dictionary<string, ReferenceCase> Cache = [];

    private ReferenceCase(string name, double[] p, byte[] y, double[] eta, JsonElement json)
    {
        Name = name;
        P = p;
        Y = y;
        Eta = eta;
        Json = json;
    }

    public string Name { get; }

    public double[] P { get; }

    public byte[] Y { get; }

    public double[] Eta { get; }

    public JsonElement Json { get; }

    public static ReferenceCase Load(string name)
    {
        lock (Cache)
        {
            if (Cache.TryGetValue(name, out var cached))
            {
                return cached;
            }

            var lines = File.ReadAllLines(TestRepository.CalibrationFile(name + ".csv"));
            Assert.Equal("p,y,eta", lines[0]);
            var rows = lines.Skip(1).Where(l => l.Length > 0).Select(l => l.Split(',')).ToArray();
            var p = rows.Select(r => double.Parse(r[0], CultureInfo.InvariantCulture)).ToArray();
            var y = rows.Select(r => byte.Parse(r[1], CultureInfo.InvariantCulture)).ToArray();
            var eta = rows.Select(r => double.Parse(r[2], CultureInfo.InvariantCulture)).ToArray();
            using var doc = JsonDocument.Parse(File.ReadAllText(TestRepository.CalibrationFile(name + ".json")));
            var loaded = new ReferenceCase(name, p, y, eta, doc.RootElement.Clone());
            Cache[name] = loaded;
            return loaded;
        }
    }

    public double Number(string field) => Json.GetProperty(field).GetDouble();

    public int Integer(string field) => Json.GetProperty(field).GetInt32();

    public double[] Numbers(string field) => Json.GetProperty(field).EnumerateArray().Select(e => e.GetDouble()).ToArray();

    public JsonElement[] Objects(string field) => Json.GetProperty(field).EnumerateArray().ToArray();
}

/// <summary>
/// Tolerance assertions that report the error, the values and what was compared, and write every error to the test
/// output (visible with <c>dotnet test --logger "console;verbosity=detailed"</c>).
/// </summary>
internal sealed class Near(Xunit.Abstractions.ITestOutputHelper output)
{
    /// <summary>|actual − expected| ≤ tolerance·|expected| (absolute when expected is 0).</summary>
    public void Relative(double expected, double actual, double tolerance, string what)
    {
        var error = RelativeError(expected, actual);
        output.WriteLine($"{what}: relative error {error:E2}");
        Assert.True(error <= tolerance,
            $"{what}: expected {expected:R}, got {actual:R}, relative error {error:E3} > {tolerance:E1}");
    }

    /// <summary>|actual − expected| ≤ tolerance.</summary>
    public void Absolute(double expected, double actual, double tolerance, string what)
    {
        var error = Math.Abs(actual - expected);
        output.WriteLine($"{what}: absolute error {error:E2}");
        Assert.True(error <= tolerance, $"{what}: expected {expected:R}, got {actual:R}, error {error:E3} > {tolerance:E1}");
    }

    public static double RelativeError(double expected, double actual)
    {
        if (expected == actual)
        {
            return 0.0;
        }

        var diff = Math.Abs(actual - expected);
        return expected == 0.0 ? diff : diff / Math.Abs(expected);
    }
}
