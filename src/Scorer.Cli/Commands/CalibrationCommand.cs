using System.Globalization;
using System.Text.Json;
using Scorer.Statistics;
using Scorer.Tabular;

namespace Scorer.Cli.Commands;

/// <summary>
/// <c>scorer calibration --input scored.csv --probability COL --outcome COL [--json] [--level 0.95]</c>: the offline
/// calibration and discrimination report of labelled predictions (<see cref="CalibrationStatistics.Compute"/>), as
/// text or as JSON with the names of the service's monitor report. Exit 0 on success, 1 when the data are wrong or
/// unreadable, 2 when the command line is (a missing or malformed option, a column the header lacks).
/// </summary>
internal static class CalibrationCommand
{
    public const string HosmerLemeshowGrouping =
        "deciles of predicted probability (R quantile type 7, tied breaks merged); df = groups, for data the model was not fit on";

    public sealed record Options(
        string? Input, string? Probability, string? Outcome, bool Json, string? Level, bool DropMissing, IReadOnlyList<string> Unmatched);

    public static int Run(Options o, TextWriter stdout, TextWriter stderr)
    {
        const string Name = "scorer calibration";
        try
        {
            var usage = new List<string>();
            CommandLine.Unmatched(o.Unmatched, usage);
            CommandLine.Required(o.Input, "--input", "the CSV of labelled predictions", usage);
            CommandLine.Required(o.Probability, "--probability", "the column of predicted probabilities", usage);
            CommandLine.Required(o.Outcome, "--outcome", "the column of outcomes (0/1 or false/true)", usage);
            var level = CommandLine.Level(o.Level, usage);
            CommandLine.ThrowIfAny(usage);

            var data = LabelledCsv.Read(o.Input!, o.Probability!, "--probability", LabelledCsv.ValueKind.Probability, o.Outcome!, o.DropMissing);
            if (data.Dropped > 0)
            {
                stderr.WriteLine($"{Name}: {data.Dropped} row(s) with a missing probability or outcome left out (--drop-missing)");
            }

            var report = CalibrationStatistics.Compute(data.Values, data.Outcomes, level);
            if (o.Json)
            {
                WriteJson(report, o, level, data, stdout);
            }
            else
            {
                WriteText(report, o, level, stdout);
            }

            return 0;
        }
        catch (CommandException ex)
        {
            ex.Print(Name, stderr);
            return ex.ExitCode;
        }
    }

    private static void WriteText(CalibrationReport r, Options o, double level, TextWriter w)
    {
        var ci = CultureInfo.InvariantCulture;
        string F(double x, string format = "G6") => double.IsNaN(x) ? "-" : x.ToString(format, ci);
        string Interval(double lower, double upper) => $"[{F(lower)}, {F(upper)}]";
        var pct = (level * 100).ToString("G6", ci) + "%";

        w.WriteLine($"calibration of '{o.Probability}' against '{o.Outcome}' in {o.Input}: {r.Labelled} labelled rows, {r.Events} events, " +
            $"{F(r.Expected)} expected; intervals at {pct}");
        w.WriteLine();
        const int Label = 24;
        w.WriteLine("observed/expected".PadRight(Label) + (r.ObservedExpected is { } oe
            ? $"{F(oe.Estimate)}  {Interval(oe.Lower, oe.Upper)}  (Poisson interval for the observed count)"
            : "not defined (no events or no expected events)"));
        w.WriteLine("calibration intercept".PadRight(Label) + (r.CalibrationIntercept is { } a
            ? $"{F(a.Estimate)}  se {F(a.Se)}  {Interval(a.Lower, a.Upper)}  (logit P(y=1) = a + logit p; 0 when calibrated in the large)"
            : "not estimable (no events, no non-events, or no convergence)"));
        w.WriteLine("calibration slope".PadRight(Label) + (r.CalibrationSlope is { } b
            ? $"{F(b.Estimate)}  se {F(b.Se)}  {Interval(b.Lower, b.Upper)}  (logit P(y=1) = c + b logit p, c = {F(r.CalibrationSlopeIntercept ?? double.NaN)}; 1 when calibrated)"
            : "not estimable (no events, no non-events, constant p, separation, or no convergence)"));
        w.WriteLine("Spiegelhalter z".PadRight(Label) + (r.Spiegelhalter is { } s
            ? $"{F(s.Z)}  p {P(s.P)}"
            : "not defined (every p is 0, 1/2 or 1)"));
        w.WriteLine("Hosmer-Lemeshow".PadRight(Label) + (r.HosmerLemeshow is { } hl
            ? $"{F(hl.Statistic)} on {hl.Df} df, p {P(hl.P)}; groups: {HosmerLemeshowGrouping}"
            : "not defined (fewer than two risk groups)"));
        w.WriteLine("Brier score".PadRight(Label) + $"{F(r.Brier)} = reliability {F(r.Murphy.Reliability)} - resolution {F(r.Murphy.Resolution)} " +
            $"+ uncertainty {F(r.Murphy.Uncertainty)} + within-bin {F(r.Murphy.WithinBin)} (Murphy, 10 bins)");
        w.WriteLine("log loss".PadRight(Label) + F(r.LogLoss));
        w.WriteLine("ECE".PadRight(Label) + $"{F(r.Ece)}  (over the reliability bins below)");
        w.WriteLine("AUC".PadRight(Label) + (r.Auc is { } auc
            ? $"{F(auc.Estimate)}  se {F(auc.Se)}  {Interval(auc.Lower, auc.Upper)}  (DeLong)"
            : "not defined (no events or no non-events)"));

        w.WriteLine();
        w.WriteLine($"reliability: 10 equal-width bins of predicted probability, empty bins left out; Wilson {pct} interval of the observed rate");
        w.WriteLine("bin".PadRight(26) + "count".PadLeft(8) + "events".PadLeft(8) + "mean p".PadLeft(12) + "observed".PadLeft(12) + "  interval");
        foreach (var bin in r.Reliability)
        {
            var edges = bin.Bin == 0 ? $"[{F(bin.Lower, "G4")}, {F(bin.Upper, "G4")}]" : $"({F(bin.Lower, "G4")}, {F(bin.Upper, "G4")}]";
            w.WriteLine(edges.PadRight(26) + bin.Count.ToString(ci).PadLeft(8) + bin.Events.ToString(ci).PadLeft(8) +
                F(bin.MeanPredicted, "F4").PadLeft(12) + F(bin.ObservedRate, "F4").PadLeft(12) + "  " +
                $"[{F(bin.WilsonLower, "F4")}, {F(bin.WilsonUpper, "F4")}]");
        }

        if (r.HosmerLemeshow is { } groups)
        {
            w.WriteLine();
            w.WriteLine("Hosmer-Lemeshow groups");
            w.WriteLine("p range".PadRight(26) + "count".PadLeft(8) + "observed".PadLeft(10) + "expected".PadLeft(12));
            foreach (var g in groups.Groups)
            {
                w.WriteLine($"[{F(g.MinPredicted, "F4")}, {F(g.MaxPredicted, "F4")}]".PadRight(26) + g.Count.ToString(ci).PadLeft(8) +
                    g.Observed.ToString(ci).PadLeft(10) + F(g.Expected, "F2").PadLeft(12));
            }
        }
    }

    internal static string P(double p) =>
        double.IsNaN(p) ? "-" : p < 1e-16 ? "< 1e-16" : p.ToString(p < 1e-4 ? "0.0E+0" : "F4", CultureInfo.InvariantCulture);

    private static void WriteJson(CalibrationReport r, Options o, double level, LabelledCsv.Data data, TextWriter stdout)
    {
        using var ms = new MemoryStream();
        using (var w = new Utf8JsonWriter(ms, new JsonWriterOptions { Indented = true }))
        {
            w.WriteStartObject();
            w.WriteString("input", o.Input);
            w.WriteString("probability", o.Probability);
            w.WriteString("outcome", o.Outcome);
            w.WriteNumber("level", level);
            w.WriteNumber("dropped", data.Dropped);
            w.WriteNumber("labelled", r.Labelled);
            w.WriteNumber("events", r.Events);
            Number(w, "expected", r.Expected);
            Number(w, "brier", r.Brier);
            Number(w, "logLoss", r.LogLoss);
            Number(w, "ece", r.Ece);
            if (r.Auc is { } auc)
            {
                Estimate(w, "auc", auc.Estimate, auc.Se, auc.Lower, auc.Upper);
            }
            else
            {
                w.WriteNull("auc");
            }

            if (r.ObservedExpected is { } oe)
            {
                w.WriteStartObject("observedExpected");
                Number(w, "estimate", oe.Estimate);
                Number(w, "lower", oe.Lower);
                Number(w, "upper", oe.Upper);
                w.WriteEndObject();
            }
            else
            {
                w.WriteNull("observedExpected");
            }

            Fitted(w, "calibrationIntercept", r.CalibrationIntercept);
            Fitted(w, "calibrationSlope", r.CalibrationSlope);
            if (r.Spiegelhalter is { } s)
            {
                w.WriteStartObject("spiegelhalter");
                Number(w, "z", s.Z);
                Number(w, "p", s.P);
                w.WriteEndObject();
            }
            else
            {
                w.WriteNull("spiegelhalter");
            }

            if (r.HosmerLemeshow is { } hl)
            {
                w.WriteStartObject("hosmerLemeshow");
                Number(w, "statistic", hl.Statistic);
                w.WriteNumber("df", hl.Df);
                Number(w, "p", hl.P);
                w.WriteString("grouping", HosmerLemeshowGrouping);
                w.WriteStartArray("groups");
                foreach (var g in hl.Groups)
                {
                    w.WriteStartObject();
                    w.WriteNumber("count", g.Count);
                    w.WriteNumber("observed", g.Observed);
                    Number(w, "expected", g.Expected);
                    Number(w, "minPredicted", g.MinPredicted);
                    Number(w, "maxPredicted", g.MaxPredicted);
                    w.WriteEndObject();
                }

                w.WriteEndArray();
                w.WriteEndObject();
            }
            else
            {
                w.WriteNull("hosmerLemeshow");
            }

            w.WriteStartArray("reliability");
            foreach (var bin in r.Reliability)
            {
                w.WriteStartObject();
                Number(w, "lower", bin.Lower);
                Number(w, "upper", bin.Upper);
                w.WriteNumber("count", bin.Count);
                w.WriteNumber("events", bin.Events);
                Number(w, "meanPredicted", bin.MeanPredicted);
                Number(w, "observedRate", bin.ObservedRate);
                Number(w, "observedLower", bin.WilsonLower);
                Number(w, "observedUpper", bin.WilsonUpper);
                w.WriteEndObject();
            }

            w.WriteEndArray();
            w.WriteStartObject("murphy");
            Number(w, "reliability", r.Murphy.Reliability);
            Number(w, "resolution", r.Murphy.Resolution);
            Number(w, "uncertainty", r.Murphy.Uncertainty);
            Number(w, "withinBin", r.Murphy.WithinBin);
            w.WriteEndObject();
            w.WriteEndObject();
        }

        stdout.WriteLine(System.Text.Encoding.UTF8.GetString(ms.ToArray()));
    }

    private static void Fitted(Utf8JsonWriter w, string name, FittedValue? value)
    {
        if (value is { } v)
        {
            Estimate(w, name, v.Estimate, v.Se, v.Lower, v.Upper);
        }
        else
        {
            w.WriteNull(name);
        }
    }

    private static void Estimate(Utf8JsonWriter w, string name, double estimate, double se, double lower, double upper)
    {
        w.WriteStartObject(name);
        Number(w, "estimate", estimate);
        Number(w, "se", se);
        Number(w, "lower", lower);
        Number(w, "upper", upper);
        w.WriteEndObject();
    }

    /// <summary>A number, or null where it is not finite (JSON has no NaN or infinity).</summary>
    internal static void Number(Utf8JsonWriter w, string name, double value)
    {
        if (double.IsFinite(value))
        {
            w.WriteNumber(name, value);
        }
        else
        {
            w.WriteNull(name);
        }
    }
}

/// <summary>A failure of a command: the messages to print and the exit code (1 for data, 2 for usage).</summary>
internal sealed class CommandException(int exitCode, IReadOnlyList<string> messages) : Exception(string.Join("; ", messages))
{
    public const int DataError = 1;
    public const int UsageError = 2;

    public CommandException(int exitCode, string message)
        : this(exitCode, [message])
    {
    }

    public int ExitCode { get; } = exitCode;

    public IReadOnlyList<string> Messages { get; } = messages;

    public void Print(string command, TextWriter stderr)
    {
        if (Messages.Count == 1)
        {
            stderr.WriteLine($"{command}: {Messages[0]}");
            return;
        }

        stderr.WriteLine($"{command}: {(ExitCode == UsageError ? "the command line is wrong" : "the data cannot be used")}:");
        foreach (var m in Messages)
        {
            stderr.WriteLine("  " + m);
        }
    }
}

/// <summary>Checks of options the commands parse themselves, so that every usage error exits with 2.</summary>
internal static class CommandLine
{
    public static void Unmatched(IReadOnlyList<string> tokens, List<string> usage)
    {
        foreach (var t in tokens)
        {
            usage.Add(t.StartsWith('-') ? $"unknown option '{t}'" : $"unexpected argument '{t}'");
        }
    }

    public static void Required(string? value, string option, string what, List<string> usage)
    {
        if (string.IsNullOrEmpty(value))
        {
            usage.Add($"{option} is required: {what}");
        }
    }

    public static double Level(string? text, List<string> usage) => Fraction(text, "--level", "confidence level", 0.95, usage);

    public static double Fraction(string? text, string option, string what, double fallback, List<string> usage)
    {
        if (text is null)
        {
            return fallback;
        }

        if (!double.TryParse(text, NumberStyles.Float, CultureInfo.InvariantCulture, out var value))
        {
            usage.Add($"{option}: '{text}' is not a number; the {what} lies strictly between 0 and 1");
            return fallback;
        }

        if (!(value > 0 && value < 1))
        {
            usage.Add($"{option}: the {what} must lie strictly between 0 and 1, got {text}");
            return fallback;
        }

        return value;
    }

    public static void ThrowIfAny(List<string> usage)
    {
        if (usage.Count > 0)
        {
            throw new CommandException(CommandException.UsageError, usage);
        }
    }
}

/// <summary>
/// Reads a value column and a 0/1 outcome column from a CSV (header first) in one streaming pass. A column the header
/// lacks is a usage error; a malformed or out-of-range cell a data error naming its row and value. Missing cells (empty,
/// NA, NaN, null) are refused unless <c>dropMissing</c>, which leaves their rows out and counts them.
/// </summary>
internal static class LabelledCsv
{
    private const int MaxProblems = 10;

    public enum ValueKind
    {
        /// <summary>A probability in [0, 1].</summary>
        Probability,

        /// <summary>A finite linear predictor.</summary>
        LinearPredictor,
    }

    public sealed record Data(double[] Values, byte[] Outcomes, int Dropped);

    public static Data Read(string path, string valueColumn, string valueOption, ValueKind kind, string outcomeColumn, bool dropMissing)
    {
        Stream stream;
        try
        {
            stream = path == "-" ? Console.OpenStandardInput() : File.OpenRead(path);
        }
        catch (Exception ex) when (ex is IOException or UnauthorizedAccessException)
        {
            throw new CommandException(CommandException.DataError, $"cannot read --input {path}: {ex.Message}");
        }

        using (stream)
        {
            using var text = new StreamReader(stream, detectEncodingFromByteOrderMarks: true, bufferSize: 1 << 16);
            using var csv = new CsvReader(text);
            try
            {
                return Read(csv, path, valueColumn, valueOption, kind, outcomeColumn, dropMissing);
            }
            catch (FormatException ex)
            {
                throw new CommandException(CommandException.DataError, $"{path} is not valid CSV: {ex.Message}");
            }
        }
    }

    private static Data Read(CsvReader csv, string path, string valueColumn, string valueOption, ValueKind kind, string outcomeColumn, bool dropMissing)
    {
        if (!csv.TryRead())
        {
            throw new CommandException(CommandException.DataError, $"{path} is empty; its first line must name the columns");
        }

        var header = Enumerable.Range(0, csv.FieldCount).Select(csv.GetString).ToList();
        var usage = new List<string>();
        var valueCol = Column(header, valueColumn, valueOption, path, usage);
        var outcomeCol = Column(header, outcomeColumn, "--outcome", path, usage);
        CommandLine.ThrowIfAny(usage);

        var values = new List<double>();
        var outcomes = new List<byte>();
        var problems = new List<string>();
        var extraProblems = 0;
        long missingValue = 0, missingOutcome = 0, firstMissingRow = 0;
        var dropped = 0;
        long row = 0;
        void Problem(string message)
        {
            if (problems.Count < MaxProblems)
            {
                problems.Add(message);
            }
            else
            {
                extraProblems++;
            }
        }

        while (csv.TryRead())
        {
            if (csv.FieldCount == 1 && csv[0].IsEmpty)
            {
                continue; // a blank line
            }

            row++;
            var valueCell = valueCol < csv.FieldCount ? csv[valueCol] : [];
            var outcomeCell = outcomeCol < csv.FieldCount ? csv[outcomeCol] : [];
            var valueMissing = CsvCells.IsMissing(valueCell);
            var outcomeMissing = CsvCells.IsMissing(outcomeCell);
            if (valueMissing || outcomeMissing)
            {
                missingValue += valueMissing ? 1 : 0;
                missingOutcome += outcomeMissing ? 1 : 0;
                firstMissingRow = firstMissingRow == 0 ? row : firstMissingRow;
                dropped++;
                continue;
            }

            var where = $"data row {row} (CSV record {csv.RecordNumber}, the header being record 1)";
            double value = double.NaN;
            if (!CsvCells.TryParseNumber(valueCell, out value))
            {
                Problem($"column '{valueColumn}', {where}: '{valueCell}' is not a number");
            }
            else if (kind == ValueKind.Probability && !(value >= 0.0 && value <= 1.0))
            {
                Problem($"column '{valueColumn}', {where}: {valueCell} is not a probability in [0, 1]");
            }
            else if (kind == ValueKind.LinearPredictor && !double.IsFinite(value))
            {
                Problem($"column '{valueColumn}', {where}: {valueCell} is not a finite linear predictor");
            }

            var outcome = Outcome(outcomeCell);
            if (outcome < 0)
            {
                Problem($"column '{outcomeColumn}', {where}: '{outcomeCell}' is not an outcome (0/1 or false/true)");
            }

            values.Add(value);
            outcomes.Add((byte)Math.Max(outcome, 0));
        }

        if (dropped > 0 && !dropMissing)
        {
            var parts = new List<string>();
            if (missingValue > 0)
            {
                parts.Add($"column '{valueColumn}' in {missingValue} row(s)");
            }

            if (missingOutcome > 0)
            {
                parts.Add($"column '{outcomeColumn}' in {missingOutcome} row(s)");
            }

            problems.Insert(0, $"values are missing: {string.Join(" and ", parts)} (the first is data row {firstMissingRow}); " +
                "leave those rows out with --drop-missing");
        }

        if (extraProblems > 0)
        {
            problems.Add($"... and {extraProblems} more");
        }

        if (problems.Count > 0)
        {
            throw new CommandException(CommandException.DataError, problems);
        }

        if (values.Count == 0)
        {
            throw new CommandException(CommandException.DataError, $"{path} has no labelled rows" + (dropped > 0 ? $" ({dropped} left out with a missing value)" : ""));
        }

        return new Data([.. values], [.. outcomes], dropMissing ? dropped : 0);
    }

    private static int Column(List<string> header, string name, string option, string path, List<string> usage)
    {
        var i = header.IndexOf(name);
        if (i < 0)
        {
            usage.Add($"{option}: {path} has no column '{name}'; its columns are {string.Join(", ", header)}");
        }
        else if (header.LastIndexOf(name) != i)
        {
            usage.Add($"{option}: column '{name}' appears more than once in the header of {path}");
        }

        return i;
    }

    /// <summary>1, 0, or −1 when the cell is not an outcome: 0/1, 0.0/1.0, false/true in any case.</summary>
    private static int Outcome(ReadOnlySpan<char> cell)
    {
        if (cell is "1" or "1.0" || cell.Equals("true", StringComparison.OrdinalIgnoreCase))
        {
            return 1;
        }

        if (cell is "0" or "0.0" || cell.Equals("false", StringComparison.OrdinalIgnoreCase))
        {
            return 0;
        }

        return -1;
    }
}
