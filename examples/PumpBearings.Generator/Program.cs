using System.Globalization;

namespace PumpBearings.Generator;

/// <summary>
/// Writes the invented examples under examples/: simulated training data, a model fitted to it by IRLS, new rows to
/// score and a README for each. Seeded: the output is the same on every run.
/// </summary>
/// <remarks>
/// Usage: <c>dotnet run --project examples/PumpBearings.Generator [-- [pump|card|all] [--out FOLDER]]</c>. Without
/// <c>--out</c> the files go to the examples folder of the repository, found by walking up to Scorer.sln.
/// </remarks>
public static class Program
{
    public static int Main(string[] args)
    {
        string? output = null;
        var which = "all";
        for (var i = 0; i < args.Length; i++)
        {
            switch (args[i])
            {
                case "--out" when i + 1 < args.Length:
                    output = args[++i];
                    break;
                case "pump" or "card" or "all":
                    which = args[i];
                    break;
                default:
                    Console.Error.WriteLine($"unexpected argument '{args[i]}'; usage: [pump|card|all] [--out FOLDER]");
                    return 2;
            }
        }

        output ??= FindExamplesFolder();
        if (output is null)
        {
            Console.Error.WriteLine("cannot find Scorer.sln above the current folder; pass --out FOLDER");
            return 2;
        }

        Scenario[] scenarios = which switch
        {
            "pump" => [new PumpBearingsScenario()],
            "card" => [new CardPaymentsScenario()],
            _ => [new PumpBearingsScenario(), new CardPaymentsScenario()],
        };

        foreach (var scenario in scenarios)
        {
            var report = Simulation.Run(scenario, output, Console.Out);
            Print(report, Path.Combine(output, scenario.Folder));
        }

        return 0;
    }

    private static void Print(Report r, string folder)
    {
        var doc = r.Document;
        var inv = CultureInfo.InvariantCulture;
        Console.WriteLine(string.Create(inv,
            $"{doc.Model} {doc.Version} ({ReadmeParts.Percent(r.EventRate)} events: {r.Events} of {r.N}; IRLS {r.Fit.Iterations} iterations; max se(eta) {r.MaxSe:F4}) -> {folder}"));
        for (var j = 0; j < doc.Terms.Length; j++)
        {
            Console.WriteLine(string.Create(inv,
                $"  {doc.Terms[j].Name,-34} true {r.TrueCoefficients[j],8:F3}  fitted {doc.Terms[j].Coefficient,8:F3}  se {r.StandardError(j),6:F3}"));
        }
    }

    private static string? FindExamplesFolder()
    {
        foreach (var start in new[] { Directory.GetCurrentDirectory(), AppContext.BaseDirectory })
        {
            for (var dir = new DirectoryInfo(start); dir is not null; dir = dir.Parent)
            {
                if (File.Exists(Path.Combine(dir.FullName, "Scorer.sln")))
                {
                    return Path.Combine(dir.FullName, "examples");
                }
            }
        }

        return null;
    }
}
