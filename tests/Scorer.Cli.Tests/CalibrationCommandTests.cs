using System.Text.Json;
using Scorer.Testing;

namespace Scorer.Cli.Tests;

/// <summary>
/// <c>scorer calibration</c> on the reference cases of tests/reference/calibration (p, y, eta rows of Pima.te and
/// birthwt), against the values R (glm, pROC, quantile/cut, pchisq), sklearn, statsmodels and scipy wrote into
/// out/CASE.json (its README names the source of each field).
/// </summary>
public sealed class CalibrationCommandTests : IDisposable
{
    private readonly CliRunner _cli = new();

    public void Dispose() => _cli.Dispose();

    public static TheoryData<string> Cases => new() { "pima-logit", "pima-miscalibrated", "pima-cloglog", "birthwt-probit" };

    private static JsonElement Reference(string name)
    {
        using var doc = JsonDocument.Parse(File.ReadAllText(TestRepository.CalibrationFile(name + ".json")));
        return doc.RootElement.Clone();
    }

    private static void Near(double expected, JsonElement actual, double tolerance, string what)
    {
        Assert.True(actual.ValueKind == JsonValueKind.Number, $"{what}: not a number but {actual.ValueKind}");
        var value = actual.GetDouble();
        var error = expected == value ? 0.0 : Math.Abs(value - expected) / Math.Max(Math.Abs(expected), double.Epsilon);
        Assert.True(error <= tolerance, $"{what}: expected {expected:R}, got {value:R}, relative error {error:E3} > {tolerance:E1}");
    }

    private (int Exit, string Out, string Err) Calibration(string file, params string[] more) =>
        _cli.Run(["calibration", "--input", file, "--probability", "p", "--outcome", "y", .. more]);

    [Theory]
    [MemberData(nameof(Cases))]
    public void Json_report_agrees_with_the_R_and_sklearn_reference_values(string name)
    {
        var (exit, stdout, stderr) = Calibration(TestRepository.CalibrationFile(name + ".csv"), "--json");
        Assert.True(exit == 0, stderr);
        using var doc = JsonDocument.Parse(stdout);
        var j = doc.RootElement;
        var r = Reference(name);
        double R(string field) => r.GetProperty(field).GetDouble();
        const double Tol = 1e-8;
        // On pima-cloglog R's glm stops ~5e-10 from the optimum of the slope fit; the README of tests/reference/calibration
        // asks for about 1e-8 there, the tolerance of every field here.
        var slopeTol = Tol;

        // Counts and sums (statistics.py, agreeing with R to 1e-14).
        Assert.Equal(r.GetProperty("n").GetInt32(), j.GetProperty("labelled").GetInt32());
        Assert.Equal(r.GetProperty("events").GetInt32(), j.GetProperty("events").GetInt32());
        Near(R("expected"), j.GetProperty("expected"), 1e-12, "expected");
        // sklearn brier_score_loss and log_loss; ECE formula over sklearn calibration_curve bins.
        Near(R("brier"), j.GetProperty("brier"), Tol, "brier");
        Near(R("log_loss"), j.GetProperty("logLoss"), Tol, "logLoss");
        Near(R("ece"), j.GetProperty("ece"), Tol, "ece");
        // sklearn roc_auc_score; pROC DeLong se and ci.auc.
        var auc = j.GetProperty("auc");
        Near(R("auc"), auc.GetProperty("estimate"), Tol, "auc");
        Near(R("auc_se"), auc.GetProperty("se"), Tol, "auc se");
        Near(R("auc_lower"), auc.GetProperty("lower"), Tol, "auc lower");
        Near(R("auc_upper"), auc.GetProperty("upper"), Tol, "auc upper");
        // O/E and its Poisson interval (formula in statistics.py).
        var oe = j.GetProperty("observedExpected");
        Near(R("oe"), oe.GetProperty("estimate"), Tol, "oe");
        Near(R("oe_lower"), oe.GetProperty("lower"), Tol, "oe lower");
        Near(R("oe_upper"), oe.GetProperty("upper"), Tol, "oe upper");
        // R glm(y ~ 1 + offset(qlogis(p))) and glm(y ~ qlogis(p)), summary.glm se, Wald intervals.
        var a = j.GetProperty("calibrationIntercept");
        Near(R("cal_intercept"), a.GetProperty("estimate"), Tol, "calibration intercept");
        Near(R("cal_intercept_se"), a.GetProperty("se"), Tol, "calibration intercept se");
        Near(R("cal_intercept_lower"), a.GetProperty("lower"), Tol, "calibration intercept lower");
        Near(R("cal_intercept_upper"), a.GetProperty("upper"), Tol, "calibration intercept upper");
        var b = j.GetProperty("calibrationSlope");
        Near(R("cal_slope"), b.GetProperty("estimate"), slopeTol, "calibration slope");
        Near(R("cal_slope_se"), b.GetProperty("se"), slopeTol, "calibration slope se");
        Near(R("cal_slope_lower"), b.GetProperty("lower"), slopeTol, "calibration slope lower");
        Near(R("cal_slope_upper"), b.GetProperty("upper"), slopeTol, "calibration slope upper");
        // Spiegelhalter's z (formula, R and Python agreeing to 1e-12), p from scipy.
        var s = j.GetProperty("spiegelhalter");
        Near(R("spiegelhalter_z"), s.GetProperty("z"), Tol, "spiegelhalter z");
        Near(R("spiegelhalter_p"), s.GetProperty("p"), Tol, "spiegelhalter p");
        // Hosmer–Lemeshow: groups by R quantile/cut, p by R pchisq.
        var hl = j.GetProperty("hosmerLemeshow");
        Near(R("hl_statistic"), hl.GetProperty("statistic"), Tol, "hl statistic");
        Assert.Equal(r.GetProperty("hl_df").GetInt32(), hl.GetProperty("df").GetInt32());
        Near(R("hl_p"), hl.GetProperty("p"), Tol, "hl p");
        Assert.Contains("deciles of predicted probability", hl.GetProperty("grouping").GetString(), StringComparison.Ordinal);
        var groups = hl.GetProperty("groups").EnumerateArray().ToArray();
        var table = r.GetProperty("hl_table").EnumerateArray().ToArray();
        Assert.Equal(table.Length, groups.Length);
        for (var g = 0; g < table.Length; g++)
        {
            Assert.Equal(table[g].GetProperty("n").GetInt32(), groups[g].GetProperty("count").GetInt32());
            Assert.Equal(table[g].GetProperty("observed").GetInt32(), groups[g].GetProperty("observed").GetInt32());
            Near(table[g].GetProperty("expected").GetDouble(), groups[g].GetProperty("expected"), Tol, $"hl group {g} expected");
            Near(table[g].GetProperty("p_min").GetDouble(), groups[g].GetProperty("minPredicted"), 0, $"hl group {g} min");
            Near(table[g].GetProperty("p_max").GetDouble(), groups[g].GetProperty("maxPredicted"), 0, $"hl group {g} max");
        }

        // Murphy's decomposition (formula, statistics.py).
        var m = j.GetProperty("murphy");
        Near(R("murphy_reliability"), m.GetProperty("reliability"), Tol, "murphy reliability");
        Near(R("murphy_resolution"), m.GetProperty("resolution"), Tol, "murphy resolution");
        Near(R("murphy_uncertainty"), m.GetProperty("uncertainty"), Tol, "murphy uncertainty");
        Near(R("murphy_within"), m.GetProperty("withinBin"), Tol, "murphy within-bin");
        // Reliability table: sklearn calibration_curve bins, statsmodels Wilson intervals.
        var bins = j.GetProperty("reliability").EnumerateArray().ToArray();
        var reference = r.GetProperty("reliability").EnumerateArray().ToArray();
        Assert.Equal(reference.Length, bins.Length);
        for (var i = 0; i < reference.Length; i++)
        {
            var count = reference[i].GetProperty("count").GetInt32();
            Assert.Equal(count, bins[i].GetProperty("count").GetInt32());
            Near(reference[i].GetProperty("lower_edge").GetDouble(), bins[i].GetProperty("lower"), 0, $"bin {i} lower");
            Near(reference[i].GetProperty("upper_edge").GetDouble(), bins[i].GetProperty("upper"), 0, $"bin {i} upper");
            Near(reference[i].GetProperty("mean_predicted").GetDouble(), bins[i].GetProperty("meanPredicted"), Tol, $"bin {i} mean predicted");
            var rate = reference[i].GetProperty("observed_rate").GetDouble();
            Near(rate, bins[i].GetProperty("observedRate"), Tol, $"bin {i} observed rate");
            Assert.Equal((int)Math.Round(rate * count), bins[i].GetProperty("events").GetInt32());
            Near(reference[i].GetProperty("wilson_lower").GetDouble(), bins[i].GetProperty("observedLower"), Tol, $"bin {i} observed lower");
            Near(reference[i].GetProperty("wilson_upper").GetDouble(), bins[i].GetProperty("observedUpper"), Tol, $"bin {i} observed upper");
        }
    }

    [Fact]
    public void Text_report_names_every_statistic_with_its_interval_and_the_grouping_rule()
    {
        var (exit, stdout, stderr) = Calibration(TestRepository.CalibrationFile("pima-logit.csv"));
        Assert.True(exit == 0, stderr);
        // Counts of the reference JSON (n = 332, events = 109); Hosmer–Lemeshow on 10 groups = 10 df; AUC 0.865183 (sklearn).
        Assert.Contains("332 labelled rows, 109 events, 111.961 expected; intervals at 95%", stdout, StringComparison.Ordinal);
        Assert.Contains("Hosmer-Lemeshow         5.91183 on 10 df, p 0.8226; groups: deciles of predicted probability", stdout, StringComparison.Ordinal);
        Assert.Contains("AUC                     0.865183", stdout, StringComparison.Ordinal);
        Assert.Contains("(DeLong)", stdout, StringComparison.Ordinal);
        Assert.Contains("calibration slope       0.955454  se 0.110302", stdout, StringComparison.Ordinal);
        Assert.Contains("reliability: 10 equal-width bins", stdout, StringComparison.Ordinal);
        Assert.Contains("[0, 0.1]                        86       1", stdout, StringComparison.Ordinal);
    }

    [Fact]
    public void Level_sets_every_interval()
    {
        var (exit, stdout, _) = Calibration(TestRepository.CalibrationFile("pima-logit.csv"), "--json", "--level", "0.9");
        Assert.Equal(0, exit);
        using var doc = JsonDocument.Parse(stdout);
        var a = doc.RootElement.GetProperty("calibrationIntercept");
        var r = Reference("pima-logit");
        // Wald interval estimate ∓ 1.6448536269514722·se (qnorm(0.95) in R) around R's glm estimate and se.
        var z = 1.6448536269514722;
        Near(r.GetProperty("cal_intercept").GetDouble() - z * r.GetProperty("cal_intercept_se").GetDouble(), a.GetProperty("lower"), 1e-8, "90% lower");
        Assert.Equal(0.9, doc.RootElement.GetProperty("level").GetDouble());
    }

    [Fact]
    public void A_missing_column_is_a_usage_error_that_names_it_and_lists_the_header()
    {
        var (exit, _, stderr) = _cli.Run("calibration", "--input", TestRepository.CalibrationFile("pima-logit.csv"), "--probability", "prob", "--outcome", "y");
        Assert.Equal(2, exit);
        Assert.Contains("--probability:", stderr, StringComparison.Ordinal);
        Assert.Contains("has no column 'prob'; its columns are p, y, eta", stderr, StringComparison.Ordinal);
    }

    [Fact]
    public void A_non_numeric_probability_is_a_data_error_with_its_row_and_value()
    {
        var input = WithCell("pima-logit.csv", row: 5, column: 0, "high");
        var (exit, _, stderr) = Calibration(input);
        Assert.Equal(1, exit);
        Assert.Contains("column 'p', data row 5 (CSV record 6, the header being record 1): 'high' is not a number", stderr, StringComparison.Ordinal);
    }

    [Fact]
    public void A_probability_outside_0_1_is_a_data_error_with_its_row_and_value()
    {
        var input = WithCell("pima-logit.csv", row: 12, column: 0, "1.25");
        var (exit, _, stderr) = Calibration(input);
        Assert.Equal(1, exit);
        Assert.Contains("column 'p', data row 12 (CSV record 13, the header being record 1): 1.25 is not a probability in [0, 1]", stderr, StringComparison.Ordinal);
    }

    [Fact]
    public void An_outcome_other_than_0_1_false_true_is_a_data_error_with_its_row()
    {
        var input = WithCell("pima-logit.csv", row: 3, column: 1, "yes");
        var (exit, _, stderr) = Calibration(input);
        Assert.Equal(1, exit);
        Assert.Contains("column 'y', data row 3 (CSV record 4, the header being record 1): 'yes' is not an outcome (0/1 or false/true)", stderr, StringComparison.Ordinal);
    }

    [Fact]
    public void Outcomes_written_as_false_and_true_give_the_same_report()
    {
        var lines = File.ReadAllLines(TestRepository.CalibrationFile("pima-logit.csv"));
        var text = string.Join("\n", lines.Select((l, i) => i == 0 ? l : string.Join(",", l.Split(',').Select((c, k) => k == 1 ? (c == "1" ? "TRUE" : "FALSE") : c))));
        var (exit, stdout, stderr) = Calibration(_cli.Write("tf.csv", text + "\n"), "--json");
        Assert.True(exit == 0, stderr);
        var (_, reference, _) = Calibration(TestRepository.CalibrationFile("pima-logit.csv"), "--json");
        Assert.Equal(Strip(reference), Strip(stdout));

        static string Strip(string json) => string.Join("\n", json.Split('\n').Where(l => !l.Contains("\"input\"", StringComparison.Ordinal)));
    }

    [Fact]
    public void Missing_values_are_refused_unless_drop_missing_leaves_their_rows_out()
    {
        var input = WithCell("pima-logit.csv", row: 7, column: 1, "NA");
        var (exit, _, stderr) = Calibration(input);
        Assert.Equal(1, exit);
        Assert.Contains("values are missing: column 'y' in 1 row(s) (the first is data row 7); leave those rows out with --drop-missing", stderr, StringComparison.Ordinal);

        var (exit2, stdout, stderr2) = Calibration(input, "--json", "--drop-missing");
        Assert.True(exit2 == 0, stderr2);
        Assert.Contains("1 row(s) with a missing probability or outcome left out", stderr2, StringComparison.Ordinal);
        using var doc = JsonDocument.Parse(stdout);
        Assert.Equal(331, doc.RootElement.GetProperty("labelled").GetInt32());
        Assert.Equal(1, doc.RootElement.GetProperty("dropped").GetInt32());
    }

    [Theory]
    [InlineData("--level", "1.5", "--level: the confidence level must lie strictly between 0 and 1, got 1.5")]
    [InlineData("--level", "high", "--level: 'high' is not a number")]
    [InlineData("--colour", "red", "unknown option '--colour'")]
    public void A_bad_option_is_a_usage_error_naming_it(string option, string value, string message)
    {
        var (exit, _, stderr) = Calibration(TestRepository.CalibrationFile("pima-logit.csv"), option, value);
        Assert.Equal(2, exit);
        Assert.Contains(message, stderr, StringComparison.Ordinal);
    }

    [Fact]
    public void A_missing_required_option_is_a_usage_error_naming_it()
    {
        var (exit, _, stderr) = _cli.Run("calibration", "--input", TestRepository.CalibrationFile("pima-logit.csv"), "--probability", "p");
        Assert.Equal(2, exit);
        Assert.Contains("--outcome is required", stderr, StringComparison.Ordinal);
    }

    [Fact]
    public void An_unreadable_input_is_a_data_error()
    {
        var (exit, _, stderr) = Calibration(Path.Combine(_cli.Folder, "nowhere.csv"));
        Assert.Equal(1, exit);
        Assert.Contains("cannot read --input", stderr, StringComparison.Ordinal);
    }

    /// <summary>The reference CSV with one cell replaced (row counted from 1 after the header).</summary>
    private string WithCell(string file, int row, int column, string value)
    {
        var lines = File.ReadAllLines(TestRepository.CalibrationFile(file));
        var cells = lines[row].Split(',');
        cells[column] = value;
        lines[row] = string.Join(",", cells);
        return _cli.Write("edited-" + file, string.Join("\n", lines) + "\n");
    }
}
