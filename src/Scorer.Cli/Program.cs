using System.CommandLine;
using System.CommandLine.Invocation;
using System.Reflection;
using Scorer.Cli.Commands;

namespace Scorer.Cli;

public static class Program
{
    public static int Main(string[] args) => Run(args, Console.Out, Console.Error);

    /// <summary>Runs the command line with the given writers (tests pass their own).</summary>
    public static int Run(string[] args, TextWriter stdout, TextWriter stderr)
    {
        var root = new RootCommand("scorer: score rows with fitted binary GLMs (logit, probit, cloglog) and check model files.");
        root.Subcommands.Add(Check(stdout, stderr));
        root.Subcommands.Add(Score(stdout, stderr));
        root.Subcommands.Add(Fit(stdout, stderr));
        root.Subcommands.Add(Serve());
        root.Subcommands.Add(Calibration(stdout, stderr));
        root.Subcommands.Add(Recalibrate(stdout, stderr));
        root.Subcommands.Add(DemoCommand.Create(stdout, stderr));
        root.Options.OfType<VersionOption>().Single().Action = new PrintVersion(stdout);
        return root.Parse(args).Invoke(new InvocationConfiguration { Output = stdout, Error = stderr });
    }

    /// <summary>The tool's version (the repository's <c>Version</c>), without the build metadata.</summary>
    public static string ToolVersion =>
        typeof(Program).Assembly.GetCustomAttribute<AssemblyInformationalVersionAttribute>()?.InformationalVersion.Split('+')[0] ?? "unknown";

    /// <summary><c>scorer --version</c>: this tool's version, whatever process hosts it.</summary>
    private sealed class PrintVersion(TextWriter stdout) : SynchronousCommandLineAction
    {
        public override int Invoke(ParseResult parseResult)
        {
            stdout.WriteLine(ToolVersion);
            return 0;
        }
    }

    private static Command Check(TextWriter stdout, TextWriter stderr)
    {
        var model = new Argument<string>("model") { Description = "The model file to check." };
        var json = new Option<bool>("--json") { Description = "Print the problems as JSON." };
        var command = new Command("check", "Validate a model file; exit 0 when valid, 1 when not, printing every problem.") { model, json };
        command.SetAction(r => CheckCommand.Run(r.GetValue(model)!, r.GetValue(json), stdout, stderr));
        return command;
    }

    private static Command Score(TextWriter stdout, TextWriter stderr)
    {
        var model = new Argument<string>("model") { Description = "The model file." };
        var input = new Option<string>("--input", "-i") { Description = "CSV of rows to score, header first ('-' for standard input).", Required = true };
        var output = new Option<string?>("--output", "-o") { Description = "Where to write the scored CSV (default: standard output)." };
        var level = new Option<double>("--level") { Description = "Confidence level of the band.", DefaultValueFactory = _ => 0.95 };
        var contributions = new Option<bool>("--contributions") { Description = "Append one column per term: coefficient × term value." };
        var quiet = new Option<bool>("--quiet", "-q") { Description = "No progress display." };
        var command = new Command("score", "Score a CSV of rows: appends eta, se, probability, lower, upper, flag, warnings, error.")
        {
            model, input, output, level, contributions, quiet,
        };
        command.SetAction(r => ScoreCommand.Run(
            new ScoreCommand.Options(r.GetValue(model)!, r.GetValue(input)!, r.GetValue(output), r.GetValue(level), r.GetValue(contributions), !r.GetValue(quiet)),
            stdout, stderr));
        return command;
    }

    private static Command Fit(TextWriter stdout, TextWriter stderr)
    {
        Option<string[]> List(string name, string description) => new(name) { Description = description, AllowMultipleArgumentsPerToken = false, Arity = ArgumentArity.ZeroOrMore };
        var data = new Option<string>("--data") { Description = "CSV of labelled rows, header first.", Required = true };
        var outcome = new Option<string>("--outcome") { Description = "The outcome column.", Required = true };
        var positive = new Option<string?>("--positive") { Description = "The outcome value that means 1 (default: the column holds 0/1 or false/true)." };
        var numeric = List("--numeric", "Numeric features, comma-separated (repeatable).");
        var categorical = List("--categorical", "Categorical features, comma-separated (repeatable); treatment coding.");
        var interaction = List("--interaction", "Interactions such as vibration:site (repeatable, or comma-separated).");
        var transform = List("--transform", "Transforms such as vibration=log (identity, log, log1p, sqrt).");
        var reference = List("--reference", "Reference levels such as site=north (default: the first level in sorted order).");
        var center = new Option<bool>("--center") { Description = "Centre each numeric factor at its training mean." };
        var link = new Option<string?>("--link") { Description = "logit (default), probit or cloglog." };
        var weights = new Option<string?>("--weights") { Description = "Column of prior weights." };
        var offset = new Option<string?>("--offset") { Description = "Column added to the linear predictor with coefficient 1." };
        var model = new Option<string?>("--model") { Description = "Model name (default with --like: the live model's)." };
        var version = new Option<string>("--new-version") { Description = "Version of the new model file.", Required = true };
        var output = new Option<string?>("--output", "-o") { Description = "Where to write the model file." };
        var spec = new Option<string?>("--spec") { Description = "A model file without coefficients giving the design (features and terms)." };
        var like = new Option<string?>("--like") { Description = "An existing model file whose design (features and terms) the refit reproduces." };
        var dropMissing = new Option<bool>("--drop-missing") { Description = "Leave out rows with a missing value (counted) instead of refusing the data." };
        var json = new Option<bool>("--json") { Description = "Print the fit statistics as JSON." };
        var maxIterations = new Option<int>("--max-iterations") { Description = "Iteration cap.", DefaultValueFactory = _ => 100 };
        var threshold = new Option<double?>("--threshold") { Description = "Decision threshold on the probability, written into the model file." };
        var horizon = new Option<string?>("--horizon") { Description = "ISO 8601 duration within which the outcome is defined (default P30D)." };
        var negatives = new Option<string?>("--negatives") { Description = "explicit (default) or implicit: no positive report within the horizon counts as 0." };
        var description = new Option<string?>("--description") { Description = "Description written into the model file." };
        var quiet = new Option<bool>("--quiet", "-q") { Description = "No progress display." };
        var command = new Command("fit", "Fit a binary GLM (IRLS) to labelled rows and write the model file.")
        {
            data, outcome, positive, numeric, categorical, interaction, transform, reference, center, link, weights, offset, model, version,
            output, spec, like, dropMissing, json, maxIterations, threshold, horizon, negatives, description, quiet,
        };

        static string[] Split(string[]? values) => values is null ? [] : [.. values.SelectMany(v => v.Split(',', StringSplitOptions.TrimEntries | StringSplitOptions.RemoveEmptyEntries))];
        command.SetAction(r => FitCommand.Run(new FitCommand.Options
        {
            Data = r.GetValue(data)!,
            Outcome = r.GetValue(outcome)!,
            Positive = r.GetValue(positive),
            Numeric = Split(r.GetValue(numeric)),
            Categorical = Split(r.GetValue(categorical)),
            Interactions = Split(r.GetValue(interaction)),
            Transforms = Split(r.GetValue(transform)),
            References = Split(r.GetValue(reference)),
            Center = r.GetValue(center),
            Link = r.GetValue(link),
            Weights = r.GetValue(weights),
            Offset = r.GetValue(offset),
            Model = r.GetValue(model),
            Version = r.GetValue(version)!,
            Output = r.GetValue(output),
            Spec = r.GetValue(spec),
            Like = r.GetValue(like),
            DropMissing = r.GetValue(dropMissing),
            Json = r.GetValue(json),
            MaxIterations = r.GetValue(maxIterations),
            Threshold = r.GetValue(threshold),
            Horizon = r.GetValue(horizon),
            Negatives = r.GetValue(negatives),
            Description = r.GetValue(description),
            Progress = !r.GetValue(quiet),
        }, stdout, stderr));
        return command;
    }

    // The options of calibration and recalibrate are parsed and checked by the commands themselves (strings, none
    // required, unmatched tokens collected), so that every usage error exits with 2 and names the option.
    private static Command Calibration(TextWriter stdout, TextWriter stderr)
    {
        var input = new Option<string?>("--input", "-i") { Description = "CSV of labelled predictions, header first ('-' for standard input). Required." };
        var probability = new Option<string?>("--probability") { Description = "The column of predicted probabilities, each in [0, 1]. Required." };
        var outcome = new Option<string?>("--outcome") { Description = "The column of outcomes: 0/1 or false/true. Required." };
        var json = new Option<bool>("--json") { Description = "Print the report as JSON (the names of the service's monitor report)." };
        var level = new Option<string?>("--level") { Description = "Confidence level of every interval (default 0.95)." };
        var dropMissing = new Option<bool>("--drop-missing") { Description = "Leave out rows with a missing probability or outcome (counted) instead of refusing the data." };
        var command = new Command("calibration", "Calibration and discrimination report of labelled predictions: O/E, calibration intercept and slope, " +
            "Spiegelhalter, Hosmer-Lemeshow, Brier with Murphy's decomposition, log loss, ECE, reliability table, AUC.")
        {
            input, probability, outcome, json, level, dropMissing,
        };
        command.TreatUnmatchedTokensAsErrors = false;
        command.SetAction(r => CalibrationCommand.Run(
            new CalibrationCommand.Options(r.GetValue(input), r.GetValue(probability), r.GetValue(outcome), r.GetValue(json), r.GetValue(level),
                r.GetValue(dropMissing), [.. r.UnmatchedTokens]),
            stdout, stderr));
        return command;
    }

    private static Command Recalibrate(TextWriter stdout, TextWriter stderr)
    {
        var model = new Argument<string?>("model") { Description = "The deployed model file.", Arity = ArgumentArity.ZeroOrOne };
        var input = new Option<string?>("--input", "-i") { Description = "CSV of matured outcomes with the deployed linear predictor ('-' for standard input). Required." };
        var eta = new Option<string?>("--eta") { Description = "The column of the linear predictor the deployed version gave. Required." };
        var outcome = new Option<string?>("--outcome") { Description = "The column of outcomes: 0/1 or false/true. Required." };
        var version = new Option<string?>("--new-version") { Description = "Version of the recalibrated model. Required." };
        var kind = new Option<string?>("--kind") { Description = "auto (default: the closed test decides), in-the-large or intercept-and-slope." };
        var output = new Option<string?>("--output", "-o") { Description = "Where to write the recalibrated model file. Required." };
        var alpha = new Option<string?>("--alpha") { Description = "Significance level of the closed test (default 0.05)." };
        var dropMissing = new Option<bool>("--drop-missing") { Description = "Leave out rows with a missing eta or outcome (counted) instead of refusing the data." };
        var command = new Command("recalibrate", "Recalibrate a model on matured outcomes (intercept, or intercept and slope, on its linear predictor) " +
            "and write the new model file; the closed test of Vergouwe et al. (2017) chooses with --kind auto.")
        {
            model, input, eta, outcome, version, kind, output, alpha, dropMissing,
        };
        command.TreatUnmatchedTokensAsErrors = false;
        command.SetAction(r => RecalibrateCommand.Run(new RecalibrateCommand.Options
        {
            Model = r.GetValue(model),
            Input = r.GetValue(input),
            Eta = r.GetValue(eta),
            Outcome = r.GetValue(outcome),
            Version = r.GetValue(version),
            Kind = r.GetValue(kind),
            Output = r.GetValue(output),
            Alpha = r.GetValue(alpha),
            DropMissing = r.GetValue(dropMissing),
            Unmatched = [.. r.UnmatchedTokens],
        }, stdout, stderr));
        return command;
    }

    private static Command Serve()
    {
        var models = new Option<string?>("--models") { Description = "Folder of model files (default ./models, seeded with the demo models)." };
        var store = new Option<string?>("--store") { Description = "SQLite file for stages and the prediction log (default ./data/scorer.db)." };
        var storeKind = new Option<string?>("--store-kind") { Description = "sqlite (default) or postgres." };
        var storeConnection = new Option<string?>("--store-connection") { Description = "The PostgreSQL connection string, with --store-kind postgres." };
        var http = new Option<string?>("--http") { Description = "HOST:PORT for REST (default 127.0.0.1:8080)." };
        var grpc = new Option<string?>("--grpc") { Description = "HOST:PORT for gRPC over h2c (default 127.0.0.1:8081)." };
        var command = new Command("serve", "Run the scoring service (REST and gRPC) with the models of a folder.") { models, store, storeKind, storeConnection, http, grpc };
        command.SetAction(async (r, _) =>
        {
            var args = new List<string>();
            foreach (var (option, name) in new[]
            {
                (models, "--models"), (store, "--store"), (storeKind, "--store-kind"), (storeConnection, "--store-connection"), (http, "--http"), (grpc, "--grpc"),
            })
            {
                if (r.GetValue(option) is { } value)
                {
                    args.Add(name);
                    args.Add(value);
                }
            }

            return await Scorer.Host.ScorerServer.RunAsync([.. args]).ConfigureAwait(false);
        });
        return command;
    }
}
