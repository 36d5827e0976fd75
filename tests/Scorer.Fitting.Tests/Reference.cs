using System.Globalization;

namespace Scorer.Fitting.Tests;

/// <summary>Files written by tests/reference/fitting-reference.R (R's glm on open datasets).</summary>
internal static class Reference
{
    public static string Root { get; } = FindRoot();

    public static string File(string name)
    {
        var path = Path.Combine(Root, "tests", "reference", "out", name);
        return System.IO.File.Exists(path) ? path : throw new InvalidOperationException(
            $"{path} is missing. Run scripts/test.sh, or: Rscript tests/reference/fitting-reference.R tests/reference/out");
    }

    public static List<Dictionary<string, string>> Csv(string name)
    {
        using var reader = new StreamReader(File(name));
        using var csv = new Tabular.CsvReader(reader);
        var header = new List<string>();
        csv.TryRead(header);
        var rows = new List<Dictionary<string, string>>();
        var fields = new List<string>();
        while (csv.TryRead(fields))
        {
            rows.Add(header.Select((h, i) => (h, fields[i])).ToDictionary(p => p.h, p => p.Item2));
        }

        return rows;
    }

    public static double D(string s) => double.Parse(s, CultureInfo.InvariantCulture);

    public static void Relative(double expected, double actual, double rel, string what)
    {
        var err = expected == actual ? 0 : Math.Abs(actual - expected) / Math.Abs(expected);
        Assert.True(err <= rel, $"{what}: R {expected:R}, Scorer {actual:R} (relative error {err:E2} > {rel:E0})");
    }

    private static string FindRoot()
    {
        var dir = new DirectoryInfo(AppContext.BaseDirectory);
        while (dir is not null && !System.IO.File.Exists(Path.Combine(dir.FullName, "Scorer.sln")))
        {
            dir = dir.Parent;
        }

        return dir?.FullName ?? throw new InvalidOperationException("Scorer.sln not found");
    }
}
