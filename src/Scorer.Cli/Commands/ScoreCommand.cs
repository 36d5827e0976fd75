using System.Diagnostics;
using System.Globalization;
using Scorer.Tabular;
using Scorer.Engine;
using Scorer.Engine.Scoring;
using Scorer.ModelFile;

namespace Scorer.Cli.Commands;

/// <summary>
/// <c>scorer score MODEL.json --input rows.csv</c>: streams CSV to CSV, one record at a time, appending
/// <c>eta,se,probability,lower,upper,flag,warnings,error</c> (and the contributions when asked).
/// A row that cannot be scored gets its reason in <c>error</c>; the others score as usual.
/// </summary>
internal static class ScoreCommand
{
    public sealed record Options(string Model, string Input, string? Output, double Level, bool Contributions, bool Progress);

    public static int Run(Options o, TextWriter stdout, TextWriter stderr)
    {
        if (!(o.Level > 0 && o.Level < 1))
        {
            stderr.WriteLine($"scorer score: --level must lie strictly between 0 and 1, got {o.Level.ToString(CultureInfo.InvariantCulture)}");
            return 2;
        }

        var load = ModelFileReader.ReadFile(o.Model);
        if (load.Document is not { } doc)
        {
            stderr.WriteLine($"scorer score: {o.Model} is not a valid model file:");
            foreach (var e in load.Errors)
            {
                stderr.WriteLine("  " + e);
            }

            return 1;
        }

        var model = CompiledModel.Compile(doc);
        using var input = o.Input == "-" ? Console.OpenStandardInput() : File.OpenRead(o.Input);
        using var reader = new StreamReader(input, detectEncodingFromByteOrderMarks: true, bufferSize: 1 << 16);
        var csv = new CsvReader(reader);
        var header = new List<string>();
        if (!csv.TryRead(header))
        {
            stderr.WriteLine($"scorer score: {o.Input} is empty; the first line must name the columns");
            return 1;
        }

        var duplicate = header.GroupBy(h => h, StringComparer.Ordinal).FirstOrDefault(g => g.Count() > 1);
        if (duplicate is not null)
        {
            stderr.WriteLine($"scorer score: column '{duplicate.Key}' appears twice in the header of {o.Input}");
            return 1;
        }

        // Column of each model feature, or -1 when the input lacks it (its rows are then missing that feature).
        var columnOf = model.FeatureNames.Select(n => header.IndexOf(n)).ToArray();
        foreach (var (name, col) in model.FeatureNames.Zip(columnOf))
        {
            if (col < 0)
            {
                stderr.WriteLine($"scorer score: warning: the input has no column '{name}'; every row lacks it");
            }
        }

        using var outStream = o.Output is null ? Console.OpenStandardOutput() : File.Create(o.Output);
        using var writer = new StreamWriter(outStream, new System.Text.UTF8Encoding(false), 1 << 16);
        var output = new CsvWriter(writer);
        foreach (var h in header)
        {
            output.Field(h);
        }

        foreach (var h in new[] { "eta", "se", "probability", "lower", "upper", "flag", "warnings", "error" })
        {
            output.Field(header.Contains(h) ? "scored_" + h : h);
        }

        if (o.Contributions)
        {
            // The terms that vary between rows, as the service lists them (CompiledModel.OrderContributions).
            foreach (var t in model.VaryingTerms)
            {
                output.Field("contribution:" + model.TermNames[t]);
            }
        }

        output.EndRecord();

        var settings = ScoreSettings.WithBand(o.Level);
        var row = new NamedValue[model.FeatureCount];
        var contributions = new double[model.TermCount];
        var warnings = new RowWarning[model.MaxWarningsPerRow];
        var fields = new List<string>(header.Count);
        long rows = 0, failed = 0, warned = 0;
        var progress = Progress.Start(o.Progress, input, stderr);
        while (csv.TryRead(fields))
        {
            if (fields.Count == 1 && fields[0].Length == 0)
            {
                continue; // blank line
            }

            rows++;
            for (var f = 0; f < row.Length; f++)
            {
                var col = columnOf[f];
                var cell = col >= 0 && col < fields.Count ? fields[col] : "";
                row[f] = new NamedValue(model.FeatureNames[f], ToValue(model.FeatureKindOf(f), cell));
            }

            var r = model.Score(row, settings, contributions, warnings);
            for (var i = 0; i < header.Count; i++)
            {
                output.Field(i < fields.Count ? fields[i] : "");
            }

            if (r.Failed)
            {
                failed++;
                for (var i = 0; i < 7; i++)
                {
                    output.Field(null);
                }

                output.Field($"{RowMessages.Field(model, r.Error)}: {RowMessages.Describe(model, r.Error)}");
                if (o.Contributions)
                {
                    foreach (var t in model.VaryingTerms)
                    {
                        output.Field(null);
                    }
                }
            }
            else
            {
                output.Number(r.Eta);
                output.Number(r.Se);
                output.Number(r.Probability);
                output.Number(r.Lower);
                output.Number(r.Upper);
                output.Field(r.Flag < 0 ? null : r.Flag == 1 ? "1" : "0");
                if (r.WarningCount > 0)
                {
                    warned++;
                    var n = Math.Min(r.WarningCount, warnings.Length);
                    output.Field(string.Join("; ", warnings.Take(n).Select(w => RowMessages.Describe(model, w))));
                }
                else
                {
                    output.Field(null);
                }

                output.Field(null);
                if (o.Contributions)
                {
                    foreach (var t in model.VaryingTerms)
                    {
                        output.Number(contributions[t]);
                    }
                }
            }

            output.EndRecord();
            progress.Tick(rows);
        }

        writer.Flush();
        progress.Done(rows);
        stderr.WriteLine($"scorer score: {rows} rows scored with {doc.Model} {doc.Version}: {failed} could not be scored, {warned} with warnings");
        return 0;
    }

    private static FeatureValue ToValue(FeatureKind kind, string cell)
    {
        if (cell.Length == 0)
        {
            return FeatureValue.Missing;
        }

        if (kind == FeatureKind.Numeric)
        {
            if (cell is "NA" or "NaN" or "nan" or "null")
            {
                return FeatureValue.Missing;
            }

            return double.TryParse(cell, NumberStyles.Float, CultureInfo.InvariantCulture, out var d) ? FeatureValue.Of(d) : FeatureValue.Of(cell);
        }

        return FeatureValue.Of(cell);
    }

    /// <summary>Progress on the terminal for large inputs: percent of bytes read, at most once a second.</summary>
    private sealed class Progress
    {
        private readonly Stream? _stream;
        private readonly TextWriter _err;
        private readonly long _length;
        private readonly Stopwatch _clock = Stopwatch.StartNew();
        private long _lastMs;

        private Progress(Stream? stream, TextWriter err)
        {
            _stream = stream;
            _err = err;
            _length = stream is { CanSeek: true } ? stream.Length : 0;
        }

        public static Progress Start(bool enabled, Stream input, TextWriter err) =>
            new(enabled && !Console.IsErrorRedirected && input.CanSeek && input.Length > 32L * 1024 * 1024 ? input : null, err);

        public void Tick(long rows)
        {
            if (_stream is null || (rows & 0xFFF) != 0 || _clock.ElapsedMilliseconds - _lastMs < 1000)
            {
                return;
            }

            _lastMs = _clock.ElapsedMilliseconds;
            var pct = 100.0 * _stream.Position / _length;
            _err.Write(string.Create(CultureInfo.InvariantCulture, $"\r{pct,5:F1}%  {rows:N0} rows  {rows / _clock.Elapsed.TotalSeconds:N0} rows/s "));
        }

        public void Done(long rows)
        {
            if (_stream is not null && _lastMs > 0)
            {
                _err.WriteLine(string.Create(CultureInfo.InvariantCulture, $"\r100.0%  {rows:N0} rows in {_clock.Elapsed.TotalSeconds:F1} s          "));
            }
        }
    }
}
