using System.Globalization;

namespace Scorer.Fitting.Tests;

/// <summary>Files written by tests/reference/fitting-reference.R (R's glm on open datasets).</summary>
internal static class Reference
{
    public static string Root => Scorer.Testing.TestRepository.Root;

    public static string File(string name) => Scorer.Testing.TestRepository.ReferenceFile(name);

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
}
