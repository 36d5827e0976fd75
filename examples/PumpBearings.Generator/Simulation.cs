using System.Collections.Immutable;
using System.Globalization;
using System.Text;
using System.Text.Json;
using MathNet.Numerics.LinearAlgebra;
using Scorer.Engine;
using Scorer.Engine.Scoring;
using Scorer.ModelFile;

namespace PumpBearings.Generator;

/// <summary>
/// Runs one scenario: simulate training rows from the true model, draw outcomes, fit by IRLS, attach ranges, covariance
/// and baselines, write and re-check the model file, then write the CSV files and the README.
/// </summary>
internal static class Simulation
{
    public static Report Run(Scenario scenario, string examplesFolder, TextWriter log)
    {
        var template = scenario.Template;
        var features = template.Features;
        var names = features.Select(f => f.Name).ToArray();
        var rng = new Random(scenario.Seed);

        // 1. Training rows and outcomes from the true model (the template carries the true coefficients).
        var truth = CompiledModel.Compile(template);
        var n = scenario.TrainingRows;
        var rows = new FeatureValue[n][];
        var y = new double[n];
        for (var i = 0; i < n; i++)
        {
            rows[i] = scenario.Draw(rng);
            var p = truth.Score(Named(names, rows[i]), ScoreSettings.PointOnly).Probability;
            y[i] = rng.NextDouble() < p ? 1 : 0;
        }

        var events = (int)y.Sum();

        // 2. The design matrix, built by the scoring engine itself so that fit and scoring agree on every term.
        var k = template.Terms.Length;
        var x = Matrix<double>.Build.Dense(n, k);
        var design = new double[k];
        for (var i = 0; i < n; i++)
        {
            var error = truth.BuildDesign(Named(names, rows[i]), design, default, out _);
            if (error.IsError)
            {
                throw new InvalidOperationException($"training row {i + 1} cannot be designed: {error.Kind}");
            }

            x.SetRow(i, design);
        }

        // 3. Fit.
        var fit = Irls.Fit(x, y, template.Link, truth.InterceptIndex);
        if (!fit.Converged)
        {
            throw new InvalidOperationException($"{template.Model}: IRLS did not converge in {fit.Iterations} iterations");
        }

        // 4. Training ranges (and the imputation mean where the policy asks for it).
        var ranged = features.Select((f, j) => f.Kind == FeatureKind.Numeric ? WithRange(f, Column(rows, j)) : f).ToImmutableArray();
        var terms = template.Terms.Select((t, j) => t with { Coefficient = fit.Coefficients[j] }).ToImmutableArray();
        var covariance = Enumerable.Range(0, k)
            .Select(i => Enumerable.Range(0, k).Select(j => fit.Covariance[i, j]).ToImmutableArray())
            .ToImmutableArray();
        var fitted = template with
        {
            Features = ranged,
            Terms = terms,
            Covariance = covariance,
            Baseline = new BaselineSpec { N = n, Events = events },
        };

        // 5. Baselines from the fitted model as the engine scores it: η deciles and the largest se(η).
        var model = CompiledModel.Compile(fitted);
        var etas = new double[n];
        var maxSe = 0.0;
        for (var i = 0; i < n; i++)
        {
            var r = model.Score(Named(names, rows[i]), ScoreSettings.Default);
            etas[i] = r.Eta;
            maxSe = Math.Max(maxSe, r.Se);
        }

        var numericBaselines = ImmutableDictionary.CreateBuilder<string, BinnedBaseline>(StringComparer.Ordinal);
        var levelBaselines = ImmutableDictionary.CreateBuilder<string, ImmutableDictionary<string, double>>(StringComparer.Ordinal);
        for (var j = 0; j < features.Length; j++)
        {
            if (features[j].Kind == FeatureKind.Numeric)
            {
                numericBaselines[names[j]] = Baselines.Deciles(Column(rows, j));
            }
            else
            {
                levelBaselines[names[j]] = Baselines.LevelProportions(rows.Select(r => r[j].Text!).ToArray(), features[j].Levels);
            }
        }

        var document = fitted with
        {
            Baseline = new BaselineSpec
            {
                N = n,
                Events = events,
                LinearPredictor = Baselines.Deciles(etas, roundDigits: 4),
                MaxSe = maxSe,
                Numeric = numericBaselines.ToImmutable(),
                Levels = levelBaselines.ToImmutable(),
                // The training mean of each term's design column (the intercept left out): contributions are reported
                // against a typical row (docs/model-file.md, baseline.term_means).
                TermMeans = terms.Select((t, j) => (t, j)).Where(tj => !tj.t.IsIntercept)
                    .ToImmutableDictionary(tj => tj.t.Name, tj => x.Column(tj.j).Sum() / n, StringComparer.Ordinal),
            },
            Fit = FitSection(fit, n, events, k),
            Extensions = ImmutableDictionary<string, JsonElement>.Empty.Add("x-simulation", SimulationSection(scenario, n)),
        };

        // 6. Write, then read back through the product's own loader: the file must be valid.
        var folder = Path.Combine(examplesFolder, scenario.Folder);
        Directory.CreateDirectory(folder);
        var modelPath = Path.Combine(folder, "model.json");
        ModelFileWriter.WriteFile(document, modelPath);
        var load = ModelFileReader.ReadFile(modelPath);
        foreach (var problem in load.Problems)
        {
            log.WriteLine($"  {scenario.Folder}/model.json: {problem}");
        }

        if (load.Document is not { } reread)
        {
            throw new InvalidOperationException($"{modelPath} does not pass the model file loader");
        }

        var final = CompiledModel.Compile(reread);
        if (!final.Coefficients.SequenceEqual(model.Coefficients))
        {
            throw new InvalidOperationException($"{modelPath}: coefficients changed on the round trip");
        }

        // 7. CSV files: training rows with their outcome, and the new rows to score.
        WriteCsv(Path.Combine(folder, "training.csv"),
            [scenario.TrainingIdColumn, .. names, template.Outcome.Name],
            rows.Select((r, i) => (string[])[TrainingId(i), .. r.Select(Cell), y[i] > 0.5 ? "1" : "0"]));

        var newRows = scenario.NewRows(new Random(scenario.Seed + 1));
        WriteCsv(Path.Combine(folder, "rows.csv"),
            [scenario.NewRowIdColumn, .. names],
            newRows.Select(r => (string[])[r.Id, .. r.Values.Select(Cell)]));

        var scored = newRows.Select(r => ScoreNewRow(final, names, r)).ToArray();
        var report = new Report(scenario, reread, n, events, template.Terms.Select(t => t.Coefficient).ToArray(), fit, maxSe, scored);
        File.WriteAllText(Path.Combine(folder, "README.md"), scenario.Readme(report).ReplaceLineEndings("\n"), new UTF8Encoding(false));
        return report;
    }

    private static NamedValue[] Named(string[] names, FeatureValue[] values)
    {
        var row = new NamedValue[names.Length];
        for (var j = 0; j < names.Length; j++)
        {
            row[j] = new NamedValue(names[j], values[j]);
        }

        return row;
    }

    private static double[] Column(FeatureValue[][] rows, int j) => rows.Select(r => r[j].Number).ToArray();

    private static FeatureSpec WithRange(FeatureSpec f, double[] values) => f with
    {
        Min = values.Min(),
        Max = values.Max(),
        Mean = f.Missing == MissingPolicy.Mean ? ExactMean(values) : null,
    };

    /// <summary>The mean summed in decimal: the rows carry few decimals, so the mean comes out as written (54.91816, not 54.91815999999988).</summary>
    private static double ExactMean(double[] values) => (double)(values.Sum(v => (decimal)v) / values.Length);

    private static string TrainingId(int i) => (i + 1).ToString("D5", CultureInfo.InvariantCulture);

    private static string Cell(FeatureValue v) => v.Kind == FeatureValueKind.Missing ? "" : v.ToString();

    private static void WriteCsv(string path, string[] header, IEnumerable<string[]> records)
    {
        using var writer = new StreamWriter(path, append: false, new UTF8Encoding(false)) { NewLine = "\n" };
        writer.WriteLine(string.Join(',', header.Select(Quote)));
        foreach (var record in records)
        {
            writer.WriteLine(string.Join(',', record.Select(Quote)));
        }

        static string Quote(string s) => s.AsSpan().IndexOfAny(",\"\n\r") >= 0 ? "\"" + s.Replace("\"", "\"\"", StringComparison.Ordinal) + "\"" : s;
    }

    private static ScoredNewRow ScoreNewRow(CompiledModel model, string[] names, NewRow row)
    {
        var warnings = new RowWarning[model.MaxWarningsPerRow];
        var r = model.Score(Named(names, row.Values), ScoreSettings.Default, default, warnings);
        if (r.Failed)
        {
            return new ScoredNewRow(row, double.NaN, false, [], $"{RowMessages.Field(model, r.Error)}: {RowMessages.Describe(model, r.Error)}");
        }

        var messages = warnings.Take(Math.Min(r.WarningCount, warnings.Length)).Select(w => RowMessages.Describe(model, w)).ToArray();
        return new ScoredNewRow(row, r.Probability, r.Flag == 1, messages, null);
    }

    private static JsonElement FitSection(FitResult fit, int n, int events, int k) => Json(w =>
    {
        w.WriteStartObject();
        w.WriteString("method", "iteratively reweighted least squares (Fisher scoring), examples/PumpBearings.Generator");
        w.WriteNumber("n", n);
        w.WriteNumber("events", events);
        w.WriteNumber("iterations", fit.Iterations);
        w.WriteBoolean("converged", fit.Converged);
        w.WriteNumber("deviance", fit.Deviance);
        w.WriteNumber("null_deviance", fit.NullDeviance);
        w.WriteNumber("aic", fit.Deviance + (2 * k));
        w.WriteEndObject();
    });

    private static JsonElement SimulationSection(Scenario scenario, int n) => Json(w =>
    {
        w.WriteStartObject();
        w.WriteString("note", "Invented data: every row was simulated by the seeded generator; the true coefficients are those of the simulation.");
        w.WriteString("generator", "examples/PumpBearings.Generator");
        w.WriteNumber("seed", scenario.Seed);
        w.WriteNumber("training_rows", n);
        w.WriteStartObject("true_coefficients");
        foreach (var t in scenario.Template.Terms)
        {
            w.WriteNumber(t.Name, t.Coefficient);
        }

        w.WriteEndObject();
        w.WriteEndObject();
    });

    private static JsonElement Json(Action<Utf8JsonWriter> write)
    {
        using var ms = new MemoryStream();
        using (var w = new Utf8JsonWriter(ms))
        {
            write(w);
        }

        using var doc = JsonDocument.Parse(ms.ToArray());
        return doc.RootElement.Clone();
    }
}
