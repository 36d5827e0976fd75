using System.Globalization;
using Scorer.Engine.Scoring;
using Scorer.ModelFile;

namespace Scorer.Engine.Tests.Support;

/// <summary>Reads the values written by tests/reference/scoring-reference.R (R's glm and predict.glm).</summary>
internal static class ReferenceData
{
    public static string RepositoryRoot => Scorer.Testing.TestRepository.Root;

    public static string OutputFolder => Path.GetDirectoryName(Scorer.Testing.TestRepository.ReferenceFile("quantiles.csv"))!;

    public static ModelDocument Model(string name) => ModelFileReader.ReadValidFile(Path.Combine(OutputFolder, name + ".model.json"));

    public static List<Dictionary<string, string>> Csv(string file)
    {
        var lines = File.ReadAllLines(Path.Combine(OutputFolder, file));
        var header = SplitCsv(lines[0]);
        return lines.Skip(1).Where(l => l.Length > 0)
            .Select(l => SplitCsv(l).Select((v, i) => (header[i], v)).ToDictionary(p => p.Item1, p => p.v))
            .ToList();
    }

    public static double D(string s) => s is "" or "NA" ? double.NaN : double.Parse(s, CultureInfo.InvariantCulture);

    /// <summary>A row of the R data frame as named values, numbers for numeric features, text for categorical.</summary>
    public static NamedValue[] Row(CompiledModel model, Dictionary<string, string> cells) =>
        model.FeatureNames.Select((name, f) => new NamedValue(name,
            model.FeatureKindOf(f) == FeatureKind.Numeric ? FeatureValue.Of(D(cells[name])) : FeatureValue.Of(cells[name]))).ToArray();

    private static List<string> SplitCsv(string line)
    {
        var fields = new List<string>();
        var sb = new System.Text.StringBuilder();
        var quoted = false;
        for (var i = 0; i < line.Length; i++)
        {
            var c = line[i];
            if (quoted)
            {
                if (c == '"' && i + 1 < line.Length && line[i + 1] == '"')
                {
                    sb.Append('"');
                    i++;
                }
                else if (c == '"')
                {
                    quoted = false;
                }
                else
                {
                    sb.Append(c);
                }
            }
            else if (c == '"')
            {
                quoted = true;
            }
            else if (c == ',')
            {
                fields.Add(sb.ToString());
                sb.Clear();
            }
            else
            {
                sb.Append(c);
            }
        }

        fields.Add(sb.ToString());
        return fields;
    }
}

internal static class Tolerance
{
    /// <summary>Asserts |actual − expected| ≤ rel·|expected| (exact equality for zeros and infinities).</summary>
    public static void Relative(double expected, double actual, double rel, string what)
    {
        if (expected == actual)
        {
            return;
        }

        var err = Math.Abs(actual - expected) / Math.Abs(expected);
        Assert.True(err <= rel, $"{what}: expected {expected:R}, got {actual:R} (relative error {err:E2} > {rel:E0})");
    }
}
