using System.Globalization;
using System.Text.Json;
using Scorer.Fitting;
using Scorer.ModelFile;

namespace Scorer.Cli.Commands;

/// <summary><c>scorer fit</c>: labelled rows (CSV) to a model file, with the coefficient table and the fit statistics.</summary>
internal static class FitCommand
{
    public sealed record Options
    {
        public required string Data { get; init; }
        public required string Outcome { get; init; }
        public string? Positive { get; init; }
        public IReadOnlyList<string> Numeric { get; init; } = [];
        public IReadOnlyList<string> Categorical { get; init; } = [];
        public IReadOnlyList<string> Interactions { get; init; } = [];
        public IReadOnlyList<string> Transforms { get; init; } = [];
        public IReadOnlyList<string> References { get; init; } = [];
        public bool Center { get; init; }
        public string? Link { get; init; }
        public string? Weights { get; init; }
        public string? Offset { get; init; }
        public string? Model { get; init; }
        public required string Version { get; init; }
        public string? Output { get; init; }
        public string? Spec { get; init; }
        public string? Like { get; init; }
        public bool DropMissing { get; init; }
        public bool Json { get; init; }
        public int MaxIterations { get; init; } = 100;
        public double? Threshold { get; init; }
        public string? Horizon { get; init; }
        public string? Negatives { get; init; }
        public string? Description { get; init; }
        public bool Progress { get; init; } = true;
    }

    public static int Run(Options o, TextWriter stdout, TextWriter stderr)
    {
        try
        {
            return Fit(o, stdout, stderr);
        }
        catch (FitException ex)
        {
            stderr.WriteLine("scorer fit: the model cannot be fitted:");
            foreach (var p in ex.Problems)
            {
                stderr.WriteLine("  " + p);
            }

            return 1;
        }
        catch (IOException ex)
        {
            stderr.WriteLine("scorer fit: " + ex.Message);
            return 1;
        }
    }

    private static int Fit(Options o, TextWriter stdout, TextWriter stderr)
    {
        var problems = new List<FitProblem>();
        if (o.Spec is not null && o.Like is not null)
        {
            problems.Add(new FitProblem("--spec", "give either --spec or --like, not both"));
        }

        (DesignTemplate Template, ModelDocument Document)? template = (o.Spec ?? o.Like) is { } templatePath ? DesignTemplateReader.Read(templatePath) : null;
        if (template is not null && (o.Numeric.Count > 0 || o.Categorical.Count > 0 || o.Interactions.Count > 0 || o.Transforms.Count > 0))
        {
            problems.Add(new FitProblem("--numeric", "the design comes from the spec or model file; leave out --numeric, --categorical, --interaction and --transform"));
        }

        var link = o.Link is null ? template?.Document.Link ?? LinkKind.Logit : ParseLink(o.Link, problems);
        var transforms = ParsePairs(o.Transforms, "--transform", problems).ToDictionary(p => p.Key, p => ParseTransform(p.Key, p.Value, problems), StringComparer.Ordinal);
        var references = ParsePairs(o.References, "--reference", problems).ToDictionary(p => p.Key, p => p.Value, StringComparer.Ordinal);
        var horizon = o.Horizon ?? template?.Document.Outcome.Horizon ?? "P30D";
        var negatives = o.Negatives switch
        {
            null => template?.Document.Outcome.Negatives ?? NegativesPolicy.Explicit,
            "explicit" => NegativesPolicy.Explicit,
            "implicit" => NegativesPolicy.Implicit,
            _ => Bad(problems, "--negatives", $"'{o.Negatives}' is neither explicit nor implicit", NegativesPolicy.Explicit),
        };
        var model = o.Model ?? (template is not null && o.Like is not null ? template.Value.Document.Model : null);
        if (model is null)
        {
            problems.Add(new FitProblem("--model", "name the model (or take the name from --like)"));
        }

        if (problems.Count > 0)
        {
            throw new FitException(problems);
        }

        var numeric = template?.Template.Features.Where(f => f.Kind == FeatureKind.Numeric).Select(f => f.Name).ToList() ?? [.. o.Numeric];
        var categorical = template?.Template.Features.Where(f => f.Kind == FeatureKind.Categorical).Select(f => f.Name).ToList() ?? [.. o.Categorical];
        var columns = new TrainingColumns
        {
            Outcome = o.Outcome,
            Positive = o.Positive,
            Numeric = numeric,
            Categorical = categorical,
            Weights = o.Weights,
            Offset = o.Offset,
            DropMissing = o.DropMissing,
        };

        var started = System.Diagnostics.Stopwatch.StartNew();
        var showProgress = o.Progress && !Console.IsErrorRedirected;
        var data = TrainingData.ReadCsv(o.Data, columns, showProgress ? (done, total) => Progress(stderr, done, total, started) : null);
        var readSeconds = started.Elapsed.TotalSeconds;
        if (showProgress)
        {
            stderr.WriteLine();
        }

        if (data.Dropped > 0)
        {
            stderr.WriteLine($"scorer fit: {data.Dropped} row(s) with a missing value left out (--drop-missing)");
        }

        var request = new FitRequest
        {
            Data = data,
            Options = template is null ? new DesignOptions
            {
                Numeric = o.Numeric,
                Categorical = o.Categorical,
                Interactions = o.Interactions,
                Transforms = transforms,
                References = references,
                Center = o.Center,
            } : null,
            Template = template?.Template,
            Model = model!,
            Version = o.Version,
            Description = o.Description ?? (o.Like is not null ? template?.Document.Description : null),
            Outcome = new OutcomeSpec(o.Outcome, o.Positive ?? template?.Document.Outcome.Positive ?? "1", horizon, negatives),
            Threshold = o.Threshold ?? (o.Like is not null ? template?.Document.Threshold : null),
            Settings = new FitSettings { Link = link, MaxIterations = o.MaxIterations },
            OffsetColumn = o.Offset,
        };

        var fitStarted = System.Diagnostics.Stopwatch.StartNew();
        var fit = Fitter.Fit(request);
        var fitSeconds = fitStarted.Elapsed.TotalSeconds;
        if (o.Output is not null)
        {
            ModelFileWriter.WriteFile(fit.Document, o.Output);
        }

        if (o.Json)
        {
            WriteJson(fit, o.Output, stdout);
        }
        else
        {
            WriteTable(fit, stdout);
            stdout.WriteLine(string.Create(CultureInfo.InvariantCulture, $"read {readSeconds:F2} s, fit {fitSeconds:F2} s"));
            stdout.WriteLine(o.Output is null ? "(no --output: the model file was not written)" : $"wrote {o.Output}");
        }

        return 0;
    }

    internal static void WriteTable(FitOutcome fit, TextWriter w)
    {
        var d = fit.Document;
        var ci = CultureInfo.InvariantCulture;
        w.WriteLine($"{d.Model} {d.Version}: {ModelFileWriter.LinkName(d.Link)} link, {fit.N} rows, {fit.Events} events, {fit.Iterations} iterations");
        var width = Math.Max(12, fit.Coefficients.Max(c => c.Term.Length) + 2);
        w.WriteLine("term".PadRight(width) + "estimate".PadLeft(14) + "std. error".PadLeft(14) + "z".PadLeft(10) + "p".PadLeft(12));
        foreach (var c in fit.Coefficients)
        {
            w.WriteLine(c.Term.PadRight(width) + c.Estimate.ToString("G8", ci).PadLeft(14) + c.StandardError.ToString("G6", ci).PadLeft(14)
                + c.Z.ToString("F3", ci).PadLeft(10) + P(c.P).PadLeft(12));
        }

        var k = fit.Coefficients.Count;
        w.WriteLine(string.Create(ci, $"deviance {fit.Deviance:F4} on {fit.N - k} degrees of freedom; null deviance {fit.NullDeviance:F4} on {fit.N - 1}"));
        w.WriteLine(string.Create(ci, $"likelihood ratio against the intercept-only model: {fit.LikelihoodRatio:F4} on {fit.LikelihoodRatioDf} df, p {P(fit.LikelihoodRatioP)}"));
        w.WriteLine(string.Create(ci, $"AIC {fit.Aic:F4}"));
    }

    private static void WriteJson(FitOutcome fit, string? output, TextWriter stdout)
    {
        using var ms = new MemoryStream();
        using (var w = new Utf8JsonWriter(ms, new JsonWriterOptions { Indented = true }))
        {
            w.WriteStartObject();
            w.WriteString("model", fit.Document.Model);
            w.WriteString("version", fit.Document.Version);
            if (output is not null)
            {
                w.WriteString("output", output);
            }

            w.WritePropertyName("fit");
            fit.Document.Fit!.Value.WriteTo(w);
            w.WriteEndObject();
        }

        stdout.WriteLine(System.Text.Encoding.UTF8.GetString(ms.ToArray()));
    }

    private static string P(double p) => double.IsNaN(p) ? "-" : p < 1e-16 ? "< 1e-16" : p.ToString(p < 1e-4 ? "0.0E+0" : "F4", CultureInfo.InvariantCulture);

    private static void Progress(TextWriter err, long done, long total, System.Diagnostics.Stopwatch clock)
    {
        if (total > 0)
        {
            err.Write(string.Create(CultureInfo.InvariantCulture, $"\rreading {100.0 * done / total,5:F1}%  {clock.Elapsed.TotalSeconds:F1} s "));
        }
    }

    private static LinkKind ParseLink(string text, List<FitProblem> problems) => text switch
    {
        "logit" => LinkKind.Logit,
        "probit" => LinkKind.Probit,
        "cloglog" => LinkKind.CLogLog,
        _ => Bad(problems, "--link", $"'{text}' is not logit, probit or cloglog", LinkKind.Logit),
    };

    private static TransformKind ParseTransform(string feature, string text, List<FitProblem> problems) => text switch
    {
        "identity" => TransformKind.Identity,
        "log" => TransformKind.Log,
        "log1p" => TransformKind.Log1P,
        "sqrt" => TransformKind.Sqrt,
        _ => Bad(problems, "--transform", $"{feature}: '{text}' is not identity, log, log1p or sqrt", TransformKind.Identity),
    };

    private static IEnumerable<KeyValuePair<string, string>> ParsePairs(IReadOnlyList<string> items, string option, List<FitProblem> problems)
    {
        foreach (var item in items)
        {
            var eq = item.IndexOf('=', StringComparison.Ordinal);
            if (eq <= 0 || eq == item.Length - 1)
            {
                problems.Add(new FitProblem(option, $"'{item}' is not NAME=VALUE"));
                continue;
            }

            yield return KeyValuePair.Create(item[..eq], item[(eq + 1)..]);
        }
    }

    private static T Bad<T>(List<FitProblem> problems, string option, string reason, T fallback)
    {
        problems.Add(new FitProblem(option, reason));
        return fallback;
    }
}
