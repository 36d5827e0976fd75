using System.Globalization;
using Scorer.ModelFile;
using Scorer.Tabular;

namespace Scorer.Fitting;

/// <summary>What to read from a CSV of labelled rows.</summary>
public sealed record TrainingColumns
{
    public required string Outcome { get; init; }

    /// <summary>The outcome value that means 1; without it the column must hold 0/1 or false/true.</summary>
    public string? Positive { get; init; }

    public IReadOnlyList<string> Numeric { get; init; } = [];
    public IReadOnlyList<string> Categorical { get; init; } = [];
    public string? Weights { get; init; }
    public string? Offset { get; init; }

    /// <summary>Drop rows with a missing value in a used column (counted), instead of refusing the data.</summary>
    public bool DropMissing { get; init; }
}

/// <summary>
/// Labelled rows read from a CSV in one streaming pass: numeric columns as doubles, categorical columns as level
/// codes in order of first appearance (with their level names), the outcome as 0/1, weights and offset. Every problem
/// of the data (missing values per column, non-numbers, a non-binary outcome) is collected and reported at once.
/// </summary>
public sealed class TrainingData
{
    private TrainingData(int rows)
    {
        Rows = rows;
    }

    public int Rows { get; private set; }

    /// <summary>Rows dropped for missing values (with <see cref="TrainingColumns.DropMissing"/>).</summary>
    public int Dropped { get; private set; }

    public double[] Outcome { get; private set; } = [];
    public double[] Weights { get; private set; } = [];
    public double[]? Offset { get; private set; }
    public Dictionary<string, double[]> Numeric { get; } = new(StringComparer.Ordinal);

    /// <summary>Level codes (index into <see cref="LevelNames"/>) per categorical column.</summary>
    public Dictionary<string, int[]> Codes { get; } = new(StringComparer.Ordinal);

    public Dictionary<string, List<string>> LevelNames { get; } = new(StringComparer.Ordinal);

    /// <summary>The distinct outcome values seen (before mapping to 0/1).</summary>
    public IReadOnlyList<string> OutcomeValues { get; private set; } = [];

    public static TrainingData ReadCsv(string path, TrainingColumns columns, Action<long, long>? progress = null)
    {
        using var stream = File.OpenRead(path);
        return Read(stream, columns, progress);
    }

    /// <param name="progress">Called now and then with (bytes read, total bytes or 0 when unknown).</param>
    public static TrainingData Read(Stream stream, TrainingColumns columns, Action<long, long>? progress = null)
    {
        using var text = new StreamReader(stream, detectEncodingFromByteOrderMarks: true, bufferSize: 1 << 16);
        using var csv = new CsvReader(text);
        if (!csv.TryRead())
        {
            throw new FitException("", "the data file is empty; its first line must name the columns");
        }

        var header = Enumerable.Range(0, csv.FieldCount).Select(csv.GetString).ToList();
        var problems = new List<FitProblem>();
        int Column(string name, string role)
        {
            var i = header.IndexOf(name);
            if (i < 0)
            {
                problems.Add(new FitProblem(name, $"no such column in the data ({role}); the columns are {string.Join(", ", header)}"));
            }

            return i;
        }

        var outcomeCol = Column(columns.Outcome, "outcome");
        var numericCols = columns.Numeric.Select(n => Column(n, "numeric feature")).ToArray();
        var categoricalCols = columns.Categorical.Select(n => Column(n, "categorical feature")).ToArray();
        var weightCol = columns.Weights is null ? -1 : Column(columns.Weights, "weights");
        var offsetCol = columns.Offset is null ? -1 : Column(columns.Offset, "offset");
        if (problems.Count > 0)
        {
            throw new FitException(problems);
        }

        var numeric = columns.Numeric.Select(_ => new List<double>()).ToArray();
        var codes = columns.Categorical.Select(_ => new List<int>()).ToArray();
        var levelIndex = columns.Categorical.Select(_ => new Dictionary<string, int>(StringComparer.Ordinal)).ToArray();
        var levelNames = columns.Categorical.Select(_ => new List<string>()).ToArray();
        var outcomeRaw = new List<int>();
        var outcomeLevels = new Dictionary<string, int>(StringComparer.Ordinal);
        var outcomeNames = new List<string>();
        var weights = new List<double>();
        var offsets = new List<double>();
        var usedCols = new[] { outcomeCol, weightCol, offsetCol }.Concat(numericCols).Concat(categoricalCols).Where(c => c >= 0).Distinct().ToArray();
        var missing = new long[header.Count];
        var bad = new Dictionary<int, (long Count, string Example, long Record)>();
        var dropped = 0;
        var length = stream.CanSeek ? stream.Length : 0;

        while (csv.TryRead())
        {
            if (csv.FieldCount == 1 && csv[0].IsEmpty)
            {
                continue;
            }

            if ((csv.RecordNumber & 0xFFFF) == 0)
            {
                progress?.Invoke(stream.CanSeek ? stream.Position : 0, length);
            }

            var anyMissing = false;
            foreach (var c in usedCols)
            {
                if (c >= csv.FieldCount || CsvCells.IsMissing(csv[c]))
                {
                    missing[c]++;
                    anyMissing = true;
                }
            }

            if (anyMissing)
            {
                dropped++;
                continue;
            }

            for (var j = 0; j < numericCols.Length; j++)
            {
                numeric[j].Add(Number(csv, numericCols[j], bad));
            }

            for (var j = 0; j < categoricalCols.Length; j++)
            {
                var cell = csv[categoricalCols[j]];
                var lookup = levelIndex[j].GetAlternateLookup<ReadOnlySpan<char>>();
                if (!lookup.TryGetValue(cell, out var code))
                {
                    code = levelNames[j].Count;
                    var name = cell.ToString();
                    levelIndex[j][name] = code;
                    levelNames[j].Add(name);
                }

                codes[j].Add(code);
            }

            var outcomeCell = csv[outcomeCol];
            var outcomeLookup = outcomeLevels.GetAlternateLookup<ReadOnlySpan<char>>();
            if (!outcomeLookup.TryGetValue(outcomeCell, out var oc))
            {
                oc = outcomeNames.Count;
                var name = outcomeCell.ToString();
                outcomeLevels[name] = oc;
                outcomeNames.Add(name);
            }

            outcomeRaw.Add(oc);
            if (weightCol >= 0)
            {
                weights.Add(Number(csv, weightCol, bad));
            }

            if (offsetCol >= 0)
            {
                offsets.Add(Number(csv, offsetCol, bad));
            }
        }

        foreach (var (col, (count, example, record)) in bad.OrderBy(b => b.Key))
        {
            problems.Add(new FitProblem(header[col], $"{count} value(s) are not numbers, e.g. '{example}' in record {record}"));
        }

        if (dropped > 0 && !columns.DropMissing)
        {
            foreach (var c in usedCols.Where(c => missing[c] > 0))
            {
                problems.Add(new FitProblem(header[c], $"{missing[c]} missing value(s)"));
            }

            problems.Add(new FitProblem("", $"{dropped} row(s) have a missing value; fill them in, or pass --drop-missing to leave those rows out"));
        }

        var data = new TrainingData(outcomeRaw.Count) { Dropped = dropped, OutcomeValues = outcomeNames };
        data.Outcome = MapOutcome(outcomeRaw, outcomeNames, columns, problems);
        if (weightCol >= 0)
        {
            var w = weights.ToArray();
            var negative = w.Count(v => !(v >= 0) || !double.IsFinite(v));
            if (negative > 0)
            {
                problems.Add(new FitProblem(columns.Weights!, $"{negative} weight(s) are negative or not finite; weights must be 0 or more"));
            }

            data.Weights = w;
        }
        else
        {
            data.Weights = Enumerable.Repeat(1.0, data.Rows).ToArray();
        }

        data.Offset = offsetCol >= 0 ? offsets.ToArray() : null;
        for (var j = 0; j < numericCols.Length; j++)
        {
            var values = numeric[j].ToArray();
            var infinite = values.Count(v => !double.IsFinite(v) && !double.IsNaN(v));
            if (infinite > 0)
            {
                problems.Add(new FitProblem(columns.Numeric[j], $"{infinite} value(s) are infinite"));
            }

            data.Numeric[columns.Numeric[j]] = values;
        }

        for (var j = 0; j < categoricalCols.Length; j++)
        {
            data.Codes[columns.Categorical[j]] = codes[j].ToArray();
            data.LevelNames[columns.Categorical[j]] = levelNames[j];
        }

        if (data.Rows == 0 && problems.Count == 0)
        {
            problems.Add(new FitProblem("", dropped > 0 ? $"every row ({dropped}) has a missing value" : "the data has no rows"));
        }

        if (problems.Count > 0)
        {
            throw new FitException(problems);
        }

        progress?.Invoke(length, length);
        return data;
    }

    /// <summary>Orders the levels of a categorical column ordinally and renumbers its codes to match.</summary>
    internal void OrderLevels(string column, IReadOnlyList<string> order)
    {
        var names = LevelNames[column];
        var map = names.Select(n => order.ToList().IndexOf(n)).ToArray();
        var codes = Codes[column];
        for (var i = 0; i < codes.Length; i++)
        {
            codes[i] = map[codes[i]];
        }

        LevelNames[column] = [.. order];
    }

    private static double Number(CsvReader csv, int col, Dictionary<int, (long, string, long)> bad)
    {
        if (CsvCells.TryParseNumber(csv[col], out var d))
        {
            return d;
        }

        bad[col] = bad.TryGetValue(col, out var b) ? (b.Item1 + 1, b.Item2, b.Item3) : (1, csv.GetString(col), csv.RecordNumber);
        return double.NaN;
    }

    private static double[] MapOutcome(List<int> raw, List<string> names, TrainingColumns columns, List<FitProblem> problems)
    {
        var seen = string.Join(", ", names.Take(12).Select(n => $"'{n}'")) + (names.Count > 12 ? $" and {names.Count - 12} more" : "");
        double[] valueOf;
        if (columns.Positive is { } positive)
        {
            if (names.Count > 2 || !names.Contains(positive))
            {
                problems.Add(new FitProblem(columns.Outcome, names.Contains(positive)
                    ? $"is not binary: {names.Count} distinct values were seen ({seen})"
                    : $"the positive value '{positive}' does not occur; the values seen are {seen}"));
                return [];
            }

            valueOf = names.Select(n => n == positive ? 1.0 : 0.0).ToArray();
        }
        else
        {
            valueOf = new double[names.Count];
            for (var i = 0; i < names.Count; i++)
            {
                var n = names[i].Trim();
                if (n is "1" or "1.0" || n.Equals("true", StringComparison.OrdinalIgnoreCase))
                {
                    valueOf[i] = 1;
                }
                else if (n is "0" or "0.0" || n.Equals("false", StringComparison.OrdinalIgnoreCase))
                {
                    valueOf[i] = 0;
                }
                else
                {
                    problems.Add(new FitProblem(columns.Outcome, $"is not binary (0/1 or false/true): the values seen are {seen}; name the value that means 1 with --positive"));
                    return [];
                }
            }
        }

        return raw.Select(c => valueOf[c]).ToArray();
    }

    internal static string Format(double v) => v.ToString("R", CultureInfo.InvariantCulture);
}
