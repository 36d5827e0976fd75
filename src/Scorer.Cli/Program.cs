using System.CommandLine;
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
        return root.Parse(args).Invoke(new InvocationConfiguration { Output = stdout, Error = stderr });
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
}
