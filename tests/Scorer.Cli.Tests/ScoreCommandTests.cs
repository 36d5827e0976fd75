using Scorer.Tabular;

using System.Globalization;

namespace Scorer.Cli.Tests;

public sealed class ScoreCommandTests : IDisposable
{
    private readonly CliRunner _cli = new();

    public void Dispose() => _cli.Dispose();

    [Theory]
    [InlineData("infert", "cloglog")]
    [InlineData("birthwt", "probit")]
    public void Scored_csv_carries_R_predict_glm_values_in_round_trip_form(string dataset, string link)
    {
        // Expected values: R predict.glm(se.fit = TRUE) from tests/reference/scoring-reference.R; 1e-9 relative.
        var output = Path.Combine(_cli.Folder, "out.csv");
        var (exit, _, stderr) = _cli.Run("score", CliRunner.Reference($"{dataset}-{link}.model.json"),
            "--input", CliRunner.Reference($"{dataset}.rows.csv"), "--output", output);
        Assert.True(exit == 0, stderr);
        var scored = ReadCsv(output);
        var expected = ReadCsv(CliRunner.Reference($"{dataset}-{link}.expected.csv"));
        Assert.Equal(expected.Count, scored.Count);
        for (var i = 0; i < expected.Count; i++)
        {
            foreach (var (ours, theirs) in new[] { ("eta", "eta"), ("se", "se"), ("probability", "probability"), ("lower", "lower95"), ("upper", "upper95") })
            {
                var a = double.Parse(scored[i][ours], CultureInfo.InvariantCulture);
                var b = double.Parse(expected[i][theirs], CultureInfo.InvariantCulture);
                Assert.True(Math.Abs(a - b) <= 1e-9 * Math.Abs(b), $"row {i + 1} {ours}: {a:R} vs R {b:R}");
            }

            Assert.Equal("", scored[i]["error"]);
        }

        Assert.Contains($"{expected.Count} rows scored", stderr, StringComparison.Ordinal);
    }

    [Fact]
    public void Bad_rows_get_an_error_column_and_the_other_rows_score()
    {
        var model = CliRunner.Reference("birthwt-logit.model.json");
        var input = _cli.Write("rows.csv", """
            id,age,lwt,race,smoke,ht,ui,ptl
            a,25,130,white,0,0,0,0
            b,25,-4,white,0,0,0,0
            c,25,130,martian,0,0,0,0
            d,25,130,black,0,0,0,
            e,25,130,"other",1,0,0,1
            """.Replace("\r", "", StringComparison.Ordinal));
        var output = Path.Combine(_cli.Folder, "out.csv");
        var (exit, _, stderr) = _cli.Run("score", model, "--input", input, "--output", output);
        Assert.Equal(0, exit);
        var rows = ReadCsv(output);
        Assert.Equal(["a", "b", "c", "d", "e"], rows.Select(r => r["id"]));
        Assert.Equal("", rows[0]["error"]);
        Assert.StartsWith("lwt: the value -4 is outside the domain of the transform (log needs a value above 0)", rows[1]["error"], StringComparison.Ordinal);
        Assert.StartsWith("race: 'martian' is not a level", rows[2]["error"], StringComparison.Ordinal);
        Assert.StartsWith("ptl: the value is missing", rows[3]["error"], StringComparison.Ordinal);
        Assert.Equal("", rows[4]["error"]);
        Assert.Equal("", rows[1]["probability"]);
        Assert.True(double.Parse(rows[4]["probability"], CultureInfo.InvariantCulture) is > 0 and < 1);
        Assert.Contains("5 rows scored", stderr, StringComparison.Ordinal);
        Assert.Contains("3 could not be scored", stderr, StringComparison.Ordinal);
    }

    [Fact]
    public void Extrapolated_rows_carry_a_warning_naming_the_feature_and_the_range()
    {
        var model = CliRunner.Reference("birthwt-logit.model.json");
        var input = _cli.Write("rows.csv", "age,lwt,race,smoke,ht,ui,ptl\n60,130,white,0,0,0,0\n");
        var output = Path.Combine(_cli.Folder, "out.csv");
        Assert.Equal(0, _cli.Run("score", model, "--input", input, "--output", output).Exit);
        Assert.Equal("age=60 is above the training maximum 45 (extrapolation)", ReadCsv(output)[0]["warnings"]);
    }

    [Fact]
    public void Contributions_add_one_column_per_varying_term_that_sum_to_eta_less_a_typical_rows()
    {
        // The model file (written by R) gives the training means of the terms: contributions are measured from them, so
        // they add up to η − η̄, η̄ the linear predictor at the means; the intercept has no column.
        var path = CliRunner.Reference("infert-logit.model.json");
        var document = Scorer.ModelFile.ModelFileReader.ReadValidFile(path);
        var typical = document.Terms.Sum(t => t.Coefficient * (t.IsIntercept ? 1 : document.Baseline!.TermMeans[t.Name]));
        var output = Path.Combine(_cli.Folder, "out.csv");
        Assert.Equal(0, _cli.Run("score", path, "--input", CliRunner.Reference("infert.rows.csv"), "--output", output, "--contributions").Exit);
        var rows = ReadCsv(output);
        Assert.Equal(document.Terms.Count(t => !t.IsIntercept), rows[0].Keys.Count(k => k.StartsWith("contribution:", StringComparison.Ordinal)));
        foreach (var row in rows.Take(20))
        {
            var sum = row.Where(p => p.Key.StartsWith("contribution:", StringComparison.Ordinal)).Sum(p => double.Parse(p.Value, CultureInfo.InvariantCulture));
            Assert.Equal(double.Parse(row["eta"], CultureInfo.InvariantCulture) - typical, sum, 10);
        }
    }

    [Fact]
    public void A_level_outside_0_to_1_is_refused()
    {
        var (exit, _, stderr) = _cli.Run("score", CliRunner.Reference("infert-logit.model.json"), "--input", CliRunner.Reference("infert.rows.csv"), "--level", "95");
        Assert.Equal(2, exit);
        Assert.Contains("--level must lie strictly between 0 and 1", stderr, StringComparison.Ordinal);
    }

    [Fact]
    public void An_invalid_model_file_is_refused_with_its_errors()
    {
        var bad = _cli.Write("bad.json", "{\"format\": \"scorer.model/1\"}");
        var (exit, _, stderr) = _cli.Run("score", bad, "--input", CliRunner.Reference("infert.rows.csv"));
        Assert.Equal(1, exit);
        Assert.Contains("is not a valid model file", stderr, StringComparison.Ordinal);
    }

    private static List<Dictionary<string, string>> ReadCsv(string path)
    {
        using var reader = new StreamReader(path);
        var csv = new CsvReader(reader);
        var header = new List<string>();
        csv.TryRead(header);
        var rows = new List<Dictionary<string, string>>();
        var fields = new List<string>();
        while (csv.TryRead(fields))
        {
            rows.Add(header.Select((h, i) => (h, i < fields.Count ? fields[i] : "")).ToDictionary(p => p.h, p => p.Item2));
        }

        return rows;
    }
}
