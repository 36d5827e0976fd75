using Scorer.ModelFile;

namespace Scorer.Fitting.Tests;

/// <summary>Fits that cannot be made or trusted are refused, with the columns, terms or levels named.</summary>
public sealed class DiagnosisTests
{
    private static FitRequest Request(TrainingData data, DesignOptions options) => new()
    {
        Data = data,
        Options = options,
        Model = "m",
        Version = "1",
        Outcome = new OutcomeSpec("y", "1", "P1D", NegativesPolicy.Explicit),
    };

    private static TrainingData Read(string csv, TrainingColumns columns) => TrainingData.Read(new MemoryStream(System.Text.Encoding.UTF8.GetBytes(csv)), columns);

    [Fact]
    public void Complete_separation_that_R_flags_is_refused_naming_the_diverging_term()
    {
        // birthwt's low is bwt < 2500 g: R (fitting-reference.R) warns that glm.fit did not converge and that fitted
        // probabilities numerically 0 or 1 occurred.
        var rWarnings = File.ReadAllText(Reference.File("separation.warnings.txt"));
        Assert.Contains("fitted probabilities numerically 0 or 1 occurred", rWarnings, StringComparison.Ordinal);
        var data = TrainingData.ReadCsv(Reference.File("birthwt.train.csv"), new TrainingColumns { Outcome = "low", Numeric = ["bwt"] });
        var ex = Assert.Throws<FitException>(() => Fitter.Fit(Request(data, new DesignOptions { Numeric = ["bwt"] })));
        var problem = Assert.Single(ex.Problems);
        Assert.Contains("bwt", problem.Subject, StringComparison.Ordinal);
        Assert.Contains("separation", problem.Reason, StringComparison.Ordinal);
    }

    [Fact]
    public void Quasi_complete_separation_in_one_level_is_refused_naming_that_level()
    {
        // Invented: every row of site 'c' is positive; the other sites vary.
        var lines = new List<string> { "y,site,x" };
        var random = new Random(3);
        for (var i = 0; i < 300; i++)
        {
            var site = "abc"[i % 3];
            var x = random.NextDouble();
            var y = site == 'c' ? 1 : random.NextDouble() < 0.3 + (0.3 * x) ? 1 : 0;
            lines.Add($"{y},{site},{x.ToString(System.Globalization.CultureInfo.InvariantCulture)}");
        }

        var data = Read(string.Join('\n', lines), new TrainingColumns { Outcome = "y", Numeric = ["x"], Categorical = ["site"] });
        var ex = Assert.Throws<FitException>(() => Fitter.Fit(Request(data, new DesignOptions { Numeric = ["x"], Categorical = ["site"] })));
        Assert.Contains("site=c", ex.Problems[0].Subject, StringComparison.Ordinal);
        Assert.DoesNotContain("site=b", ex.Problems[0].Subject, StringComparison.Ordinal);
    }

    [Fact]
    public void An_aliased_term_that_R_drops_is_refused_with_the_combination_it_is()
    {
        // R gives NA for total = spontaneous + induced (fitting-reference.R, aliased.csv).
        var aliasedInR = Reference.Csv("aliased.csv").Where(r => r["aliased"] == "TRUE").Select(r => r["term"]).ToList();
        Assert.Equal(["total"], aliasedInR);
        var data = TrainingData.ReadCsv(Reference.File("infert.train.csv"), new TrainingColumns { Outcome = "case", Numeric = ["spontaneous", "induced", "total"] });
        var ex = Assert.Throws<FitException>(() => Fitter.Fit(Request(data, new DesignOptions { Numeric = ["spontaneous", "induced", "total"] })));
        var problem = Assert.Single(ex.Problems);
        Assert.Equal("total", problem.Subject);
        Assert.Contains("aliased", problem.Reason, StringComparison.Ordinal);
        Assert.Contains("1·spontaneous + 1·induced", problem.Reason, StringComparison.Ordinal);
    }

    [Fact]
    public void A_constant_term_is_refused_as_aliased_with_the_intercept()
    {
        var data = Read("y,x,c\n1,0.5,3\n0,0.1,3\n1,0.9,3\n0,0.2,3\n1,0.4,3\n0,0.7,3\n", new TrainingColumns { Outcome = "y", Numeric = ["x", "c"] });
        var ex = Assert.Throws<FitException>(() => Fitter.Fit(Request(data, new DesignOptions { Numeric = ["x", "c"] })));
        Assert.Equal("c", ex.Problems[0].Subject);
        Assert.Contains("constant (3 in every row), so it is aliased with the intercept", ex.Problems[0].Reason, StringComparison.Ordinal);
    }

    [Fact]
    public void A_non_binary_outcome_is_refused_saying_what_values_were_seen()
    {
        var ex = Assert.Throws<FitException>(() => Read("y,x\n0,1\n1,2\n2,3\n", new TrainingColumns { Outcome = "y", Numeric = ["x"] }));
        Assert.Contains("'0', '1', '2'", ex.Problems[0].Reason, StringComparison.Ordinal);
        var ex2 = Assert.Throws<FitException>(() => Read("y,x\nyes,1\nno,2\nmaybe,3\n", new TrainingColumns { Outcome = "y", Positive = "yes", Numeric = ["x"] }));
        Assert.Contains("3 distinct values were seen ('yes', 'no', 'maybe')", ex2.Problems[0].Reason, StringComparison.Ordinal);
    }

    [Fact]
    public void Missing_values_are_reported_per_column_and_dropped_only_when_asked()
    {
        const string csv = "y,a,b\n1,1,\n0,,2\n1,3,\n0,4,5\n1,5,6\n0,6,7\n";
        var columns = new TrainingColumns { Outcome = "y", Numeric = ["a", "b"] };
        var ex = Assert.Throws<FitException>(() => Read(csv, columns));
        Assert.Contains(ex.Problems, p => p.Subject == "a" && p.Reason == "1 missing value(s)");
        Assert.Contains(ex.Problems, p => p.Subject == "b" && p.Reason == "2 missing value(s)");
        Assert.Contains(ex.Problems, p => p.Reason.Contains("--drop-missing", StringComparison.Ordinal));
        var data = Read(csv, columns with { DropMissing = true });
        Assert.Equal(3, data.Dropped);
        Assert.Equal(3, data.Rows);
    }

    [Fact]
    public void Text_in_a_numeric_column_is_reported_with_an_example_and_its_record()
    {
        var ex = Assert.Throws<FitException>(() => Read("y,a\n1,1\n0,two\n1,3\n", new TrainingColumns { Outcome = "y", Numeric = ["a"] }));
        Assert.Equal("a", ex.Problems[0].Subject);
        Assert.Contains("'two' in record 3", ex.Problems[0].Reason, StringComparison.Ordinal);
    }

    [Fact]
    public void A_level_of_the_design_with_no_rows_is_refused()
    {
        var template = new DesignTemplate(
            [new FeatureSpec { Name = "site", Kind = FeatureKind.Categorical, Levels = ["east", "north", "river"], Reference = "north" }],
            [new TermSpec("(intercept)", 0, []), new TermSpec("site=east", 0, [new FactorSpec { Feature = "site", Level = "east" }]),
             new TermSpec("site=river", 0, [new FactorSpec { Feature = "site", Level = "river" }])]);
        var data = Read("y,site\n1,east\n0,north\n1,north\n0,east\n", new TrainingColumns { Outcome = "y", Categorical = ["site"] });
        var ex = Assert.Throws<FitException>(() => Fitter.Fit(Request(data, new DesignOptions()) with { Options = null, Template = template }));
        Assert.Contains(ex.Problems, p => p.Subject == "site" && p.Reason.Contains("'river' of the design has no rows", StringComparison.Ordinal));
    }

    [Fact]
    public void A_missing_column_and_a_reference_level_not_in_the_data_are_named()
    {
        var ex = Assert.Throws<FitException>(() => Read("y,a\n1,1\n", new TrainingColumns { Outcome = "y", Numeric = ["a", "b"] }));
        Assert.Contains(ex.Problems, p => p.Subject == "b" && p.Reason.StartsWith("no such column", StringComparison.Ordinal));
        var data = Read("y,site\n1,east\n0,north\n", new TrainingColumns { Outcome = "y", Categorical = ["site"] });
        var ex2 = Assert.Throws<FitException>(() => Fitter.Fit(Request(data, new DesignOptions
        {
            Categorical = ["site"],
            References = new Dictionary<string, string> { ["site"] = "west" },
        })));
        Assert.Contains("'west' does not occur", ex2.Problems[0].Reason, StringComparison.Ordinal);
    }
}
