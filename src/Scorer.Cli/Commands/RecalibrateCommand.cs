using System.Globalization;
using Scorer.ModelFile;
using Scorer.Statistics.Recalibration;

namespace Scorer.Cli.Commands;

/// <summary>
/// <c>scorer recalibrate MODEL.json --input scored.csv --eta COL --outcome COL --new-version NEW [--kind auto|in-the-large|intercept-and-slope] --output NEW.json</c>:
/// fits the recalibration on matured outcomes against the linear predictor the deployed version gave
/// (<see cref="Recalibrator"/>), prints both fits and the closed test, and writes the recalibrated model file. With
/// <c>--kind auto</c> (the default) the closed test decides; when it recommends keeping the model nothing is written.
/// Exit 0 on success (also when nothing needed writing), 1 when the model or the data cannot be used, 2 when the
/// command line is wrong.
/// </summary>
internal static class RecalibrateCommand
{
    private const string Name = "scorer recalibrate";

    public sealed record Options
    {
        public string? Model { get; init; }
        public string? Input { get; init; }
        public string? Eta { get; init; }
        public string? Outcome { get; init; }
        public string? Version { get; init; }
        public string? Kind { get; init; }
        public string? Output { get; init; }
        public string? Alpha { get; init; }
        public bool DropMissing { get; init; }
        public IReadOnlyList<string> Unmatched { get; init; } = [];
    }

    public static int Run(Options o, TextWriter stdout, TextWriter stderr)
    {
        try
        {
            return Recalibrate(o, stdout, stderr);
        }
        catch (CommandException ex)
        {
            ex.Print(Name, stderr);
            return ex.ExitCode;
        }
    }

    private static int Recalibrate(Options o, TextWriter stdout, TextWriter stderr)
    {
        var usage = new List<string>();
        CommandLine.Unmatched(o.Unmatched, usage);
        CommandLine.Required(o.Model, "MODEL", "the deployed model file (the first argument)", usage);
        CommandLine.Required(o.Input, "--input", "the CSV of matured outcomes with the deployed linear predictor", usage);
        CommandLine.Required(o.Eta, "--eta", "the column of the linear predictor the deployed version gave", usage);
        CommandLine.Required(o.Outcome, "--outcome", "the column of outcomes (0/1 or false/true)", usage);
        CommandLine.Required(o.Version, "--new-version", "the version of the recalibrated model", usage);
        CommandLine.Required(o.Output, "--output", "where to write the recalibrated model file", usage);
        var alpha = CommandLine.Fraction(o.Alpha, "--alpha", "significance level", 0.05, usage);
        RecalibrationKind? kind = null;
        try
        {
            kind = RecalibrationWorkflow.ParseKind(o.Kind);
        }
        catch (RecalibrationRefused ex)
        {
            usage.Add($"--kind: {ex.Reason}");
        }

        CommandLine.ThrowIfAny(usage);

        var model = ReadModel(o.Model!);
        try
        {
            RecalibrationWorkflow.CheckNewVersion(model, o.Version!);
        }
        catch (RecalibrationRefused ex)
        {
            usage.Add($"--new-version: {ex.Reason}");
        }

        if (Path.GetFullPath(o.Output!) == Path.GetFullPath(o.Model!))
        {
            usage.Add($"--output: {o.Output} is the model file itself; write the recalibrated model to a file of its own");
        }

        CommandLine.ThrowIfAny(usage);
        var data = LabelledCsv.Read(o.Input!, o.Eta!, "--eta", LabelledCsv.ValueKind.LinearPredictor, o.Outcome!, o.DropMissing);
        if (data.Dropped > 0)
        {
            stderr.WriteLine($"{Name}: {data.Dropped} row(s) with a missing eta or outcome left out (--drop-missing)");
        }

        RecalibrationOutcome outcome;
        try
        {
            outcome = RecalibrationWorkflow.Run(model, data.Values, data.Outcomes, kind, o.Version!, alpha);
        }
        catch (RecalibrationRefused ex)
        {
            throw new CommandException(CommandException.DataError, $"{(ex.Field == "data" ? o.Input : o.Model)}: {ex.Reason}");
        }

        if (outcome.Choice is { } choice)
        {
            Print(model, o, choice, stdout);
        }

        if (outcome is not { Fit: { } fit, Document: { } recalibrated })
        {
            stdout.WriteLine($"--kind auto: the closed test recommends keeping {model.Model} {model.Version} as it is; nothing written");
            return 0;
        }

        if (outcome.NoTest is { } noTest)
        {
            stdout.WriteLine($"no closed test: {noTest}");
            stdout.WriteLine(string.Create(CultureInfo.InvariantCulture,
                $"in the large: a = {fit.Intercept:G6} (se {fit.InterceptSe:G6}), log-likelihood {fit.LogLikelihood:G6}, {fit.Rows} rows, {fit.Events} events"));
        }

        try
        {
            ModelFileWriter.WriteFile(recalibrated, o.Output!);
        }
        catch (Exception ex) when (ex is IOException or UnauthorizedAccessException)
        {
            throw new CommandException(CommandException.DataError, $"cannot write --output {o.Output}: {ex.Message}");
        }

        var why = kind is null ? "the closed test's recommendation" : $"--kind {Recalibrator.KindName(kind.Value)}";
        stdout.WriteLine($"wrote {o.Output}: {recalibrated.Model} {recalibrated.Version}, {Recalibrator.KindName(fit.Kind)} ({why}): " +
            (fit.Kind == RecalibrationKind.InTheLarge ? "intercept + a" : "every coefficient times b, then intercept + a"));
        return 0;
    }

    private static void Print(ModelDocument model, Options o, RecalibrationChoice choice, TextWriter w)
    {
        var ci = CultureInfo.InvariantCulture;
        string F(double x) => x.ToString("G6", ci);
        var large = choice.InTheLarge;
        var slope = choice.InterceptAndSlope;
        w.WriteLine($"{model.Model} {model.Version}: {ModelFileWriter.LinkName(model.Link)} link; column '{o.Eta}' against '{o.Outcome}' in {o.Input}: " +
            $"{slope.Rows} labelled rows, {slope.Events} events");
        w.WriteLine($"fits of {ModelFileWriter.LinkName(model.Link)}(P(y=1)) = a + b*eta_old (maximum likelihood; se from the Fisher information)");
        w.WriteLine("".PadRight(22) + "log-likelihood".PadLeft(16) + "a".PadLeft(14) + "se(a)".PadLeft(12) + "b".PadLeft(14) + "se(b)".PadLeft(12) + "cov(a,b)".PadLeft(14));
        w.WriteLine("keep the model".PadRight(22) + F(choice.KeepLogLikelihood).PadLeft(16) + "0".PadLeft(14) + "".PadLeft(12) + "1".PadLeft(14));
        w.WriteLine("in the large".PadRight(22) + F(large.LogLikelihood).PadLeft(16) + F(large.Intercept).PadLeft(14) + F(large.InterceptSe).PadLeft(12) +
            "1 (fixed)".PadLeft(14));
        w.WriteLine("intercept and slope".PadRight(22) + F(slope.LogLikelihood).PadLeft(16) + F(slope.Intercept).PadLeft(14) + F(slope.InterceptSe).PadLeft(12) +
            F(slope.Slope).PadLeft(14) + F(slope.SlopeSe).PadLeft(12) + F(slope.Covariance).PadLeft(14));
        w.WriteLine($"closed test (Vergouwe et al. 2017) at alpha {F(choice.Alpha)}:");
        void Test(string label, LikelihoodRatioTest t) =>
            w.WriteLine("  " + label.PadRight(44) + $"LR {F(t.Statistic)} on {t.Df} df, p {CalibrationCommand.P(t.P)}");
        Test("intercept and slope vs keep", choice.InterceptAndSlopeVsKeep);
        Test("intercept and slope vs in the large", choice.InterceptAndSlopeVsInTheLarge);
        Test("in the large vs keep (not in the decision)", choice.InTheLargeVsKeep);
        w.WriteLine($"recommendation: {(choice.Recommended is { } k ? Recalibrator.KindName(k) : "keep the model")} ({choice.Reason})");
    }

    private static ModelDocument ReadModel(string path)
    {
        ModelFileLoadResult load;
        try
        {
            load = ModelFileReader.ReadFile(path);
        }
        catch (Exception ex) when (ex is IOException or UnauthorizedAccessException)
        {
            throw new CommandException(CommandException.DataError, $"cannot read the model file {path}: {ex.Message}");
        }

        return load.Document ?? throw new CommandException(CommandException.DataError,
            [$"{path} is not a valid model file:", .. load.Errors.Select(e => e.ToString())]);
    }
}
