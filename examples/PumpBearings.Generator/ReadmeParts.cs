using System.Globalization;
using System.Text;
using Scorer.ModelFile;

namespace PumpBearings.Generator;

/// <summary>Pieces shared by the generated READMEs: the coefficient table, the expected scoring output, the commands.</summary>
internal static class ReadmeParts
{
    public static string F(double v, string format) => v.ToString(format, CultureInfo.InvariantCulture);

    public static string Percent(double v) => (100 * v).ToString("F1", CultureInfo.InvariantCulture) + "%";

    public static string Count(int v) => v.ToString("N0", CultureInfo.InvariantCulture);

    public static string Coefficients(Report report)
    {
        var sb = new StringBuilder();
        sb.Append("| term | true | fitted | standard error | (fitted − true) / se |\n");
        sb.Append("|---|---:|---:|---:|---:|\n");
        var terms = report.Document.Terms;
        for (var j = 0; j < terms.Length; j++)
        {
            var se = report.StandardError(j);
            var fitted = terms[j].Coefficient;
            var truth = report.TrueCoefficients[j];
            sb.Append(CultureInfo.InvariantCulture, $"| `{terms[j].Name}` | {F(truth, "F3")} | {F(fitted, "F3")} | {F(se, "F3")} | {F((fitted - truth) / se, "F2")} |\n");
        }

        return sb.ToString();
    }

    public static string FitSummary(Report report)
    {
        var fit = report.Fit;
        return string.Create(CultureInfo.InvariantCulture,
            $"The fit converged in {fit.Iterations} iterations; residual deviance {fit.Deviance:F1} against a null deviance of {fit.NullDeviance:F1}. " +
            $"The largest standard error of the linear predictor over the training rows is {report.MaxSe:F4}; it is stored as `baseline.max_se`.");
    }

    /// <summary>What <c>scorer score</c> reports on rows.csv: the counts, then each row that warns, fails or was set by hand.</summary>
    public static string ExpectedScores(Report report)
    {
        var rows = report.NewRows;
        var failed = rows.Count(r => r.Error is not null);
        var warned = rows.Count(r => r.Warnings.Count > 0);
        var flagged = rows.Count(r => r.Flagged);
        var threshold = report.Document.Threshold!.Value;
        var sb = new StringBuilder();
        sb.Append(CultureInfo.InvariantCulture,
            $"Of the {rows.Count} rows, {rows.Count - failed} get a score and {failed} cannot be scored; " +
            $"{warned} {(warned == 1 ? "carries" : "carry")} warnings; {flagged} {(flagged == 1 ? "reaches" : "reach")} the threshold of {F(threshold, "0.##")} (`flag` = 1). " +
            $"The rows worth a look (set by hand, warned, rejected or flagged):\n\n");
        sb.Append("| row | why it is there | probability | what Scorer says |\n");
        sb.Append("|---|---|---:|---|\n");
        foreach (var r in rows.Where(r => r.Row.Note is not null || r.Error is not null || r.Warnings.Count > 0 || r.Flagged))
        {
            var says = r.Error is not null ? "cannot be scored: " + r.Error
                : (r.Flagged ? "flagged" : "not flagged") + (r.Warnings.Count > 0 ? "; warning: " + string.Join("; ", r.Warnings) : "");
            var probability = r.Error is not null ? "—" : F(r.Probability, "F3");
            sb.Append(CultureInfo.InvariantCulture, $"| {r.Row.Id} | {r.Row.Note ?? "drawn like the training rows"} | {probability} | {Escape(says)} |\n");
        }

        return sb.ToString();
    }

    public static string Commands(string folder) => $"""
        ## Regenerate

        From the repository root:

        ```sh
        dotnet run --project examples/PumpBearings.Generator
        ```

        The program is seeded, so it writes the same files every time. It writes both examples (`pump-bearings` and
        `card-payments`); add `-- pump` or `-- card` for one of them, or `-- --out FOLDER` to write elsewhere.

        ## Check and score

        ```sh
        dotnet run --project src/Scorer.Cli -- check examples/{folder}/model.json
        dotnet run --project src/Scorer.Cli -- score examples/{folder}/model.json --input examples/{folder}/rows.csv
        ```

        `score` writes the input columns followed by `eta, se, probability, lower, upper, flag, warnings, error`; add
        `--contributions` for one column per term and `--output scored.csv` to write a file.
        """;

    public static string FeatureRanges(ModelDocument doc)
    {
        var sb = new StringBuilder();
        sb.Append("| feature | type | training range or levels | missing value | unknown level |\n");
        sb.Append("|---|---|---|---|---|\n");
        foreach (var f in doc.Features)
        {
            if (f.Kind == FeatureKind.Numeric)
            {
                var missing = f.Missing == MissingPolicy.Mean ? $"replaced by the training mean {F(f.Mean!.Value, "F2")}" : "row rejected";
                sb.Append(CultureInfo.InvariantCulture, $"| `{f.Name}` | numeric | {F(f.Min!.Value, "0.##")} to {F(f.Max!.Value, "0.##")} | {missing} | — |\n");
            }
            else
            {
                var levels = string.Join(", ", f.Levels.Select(l => l == f.Reference ? $"`{l}` (reference)" : $"`{l}`"));
                sb.Append(CultureInfo.InvariantCulture, $"| `{f.Name}` | categorical | {levels} | row rejected | {(f.Unknown == UnknownLevelPolicy.Reject ? "row rejected" : "scored as the reference")} |\n");
            }
        }

        return sb.ToString();
    }

    private static string Escape(string s) => s.Replace("|", "\\|", StringComparison.Ordinal);
}
