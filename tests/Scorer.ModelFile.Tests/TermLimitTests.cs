namespace Scorer.ModelFile.Tests;

/// <summary>
/// The cost of one model is bounded: the number of terms (<see cref="ModelFileReaderOptions.MaxTerms"/>) bounds the
/// coefficients and, through the covariance (terms²), what the reader builds. A file over the bound is refused before
/// the schema and the covariance are looked at, naming the limit and the setting that raises it.
/// </summary>
public sealed class TermLimitTests
{
    [Fact]
    public void The_default_limit_is_500_terms()
    {
        Assert.Equal(500, ModelFileReaderOptions.Default.MaxTerms);
        Assert.Equal(500, new ModelFileReaderOptions().MaxTerms);
    }

    [Fact]
    public void More_terms_than_the_limit_are_refused_at_terms_naming_the_limit_and_the_setting()
    {
        var result = ModelFiles.Read(ModelFiles.Wide(8), new ModelFileReaderOptions { MaxTerms = 7 });

        var error = Problems.SingleErrorAt(result, "$.terms");
        Problems.Contains("8 terms", error);
        Problems.Contains("limit of 7", error);
        Assert.Contains("ModelFileReaderOptions.MaxTerms", error.Hint, StringComparison.Ordinal);
    }

    [Fact]
    public void The_hint_names_the_setting_the_host_gives()
    {
        var options = new ModelFileReaderOptions { MaxTerms = 7, MaxTermsSetting = "Scorer:ModelFiles:MaxTerms" };

        var error = Problems.SingleErrorAt(ModelFiles.Read(ModelFiles.Wide(8), options), "$.terms");

        Assert.Contains("Scorer:ModelFiles:MaxTerms", error.Hint, StringComparison.Ordinal);
    }

    [Fact]
    public void Terms_up_to_the_limit_are_read()
    {
        var result = ModelFiles.Read(ModelFiles.Wide(7), new ModelFileReaderOptions { MaxTerms = 7 });

        Assert.True(result.IsValid, Problems.List(result));
        Assert.Equal(7, result.Document!.Terms.Length);
    }

    [Fact]
    public void A_file_over_the_limit_is_refused_before_the_schema_and_the_covariance_are_checked()
    {
        // Beside too many terms: a field the schema refuses and a covariance that is not symmetric. Neither is reported,
        // because neither is looked at.
        var text = ModelFiles.Replaced(ModelFiles.Wide(8), "\"version\":\"1\",", "\"version\":\"1\",\"colour\":\"red\",");
        text = ModelFiles.Replaced(text, "[0.01,0,0,0,0,0,0,0]", "[0.01,5,0,0,0,0,0,0]");

        var result = ModelFiles.Read(text, new ModelFileReaderOptions { MaxTerms = 7 });

        Problems.SingleErrorAt(result, "$.terms");
        Assert.Empty(result.Warnings);
    }

    [Fact]
    public void A_covariance_with_more_rows_than_the_limit_is_refused_before_it_is_read()
    {
        var result = ModelFiles.Read(ModelFiles.Wide(3, covarianceRows: 9), new ModelFileReaderOptions { MaxTerms = 7 });

        var error = Problems.SingleErrorAt(result, "$.covariance");
        Problems.Contains("9 rows", error);
        Problems.Contains("limit of 7", error);
    }

    [Fact]
    public void A_covariance_row_longer_than_the_limit_is_refused_before_it_is_read()
    {
        var text = ModelFiles.Replaced(ModelFiles.Wide(3), "[0,0,0.01]", "[0,0,0.01,0,0,0,0,0,0]");

        var error = Problems.SingleErrorAt(ModelFiles.Read(text, new ModelFileReaderOptions { MaxTerms = 7 }), "$.covariance[2]");

        Problems.Contains("9 entries", error);
    }

    [Fact]
    public void A_file_of_500_terms_is_read_with_the_default_limit()
    {
        var result = ModelFiles.Read(ModelFiles.Wide(500));

        Assert.True(result.IsValid, Problems.List(result));
        Assert.Equal(500, result.Document!.Covariance!.Value.Length);
    }

    [Fact]
    public void A_document_built_in_code_is_not_held_to_the_limit_for_files()
    {
        // The limit bounds what is read from a file; a fit or a recalibration in code builds what it was asked to.
        var document = ModelFileReader.ReadValid(new MemoryStream(System.Text.Encoding.UTF8.GetBytes(ModelFiles.Wide(8))));
        var copy = document with { Description = "built in code" };

        Assert.DoesNotContain(ModelFileReader.Validate(copy, new ModelFileReaderOptions { MaxTerms = 7 }), p => p.Severity == ProblemSeverity.Error);
    }

    [Fact]
    public void An_unknown_level_of_a_feature_with_many_levels_names_a_few_of_them_not_all()
    {
        var text = ModelFiles.Replaced(ModelFiles.Wide(3), "\"level\":\"L2\"", "\"level\":\"M2\"");
        text = ModelFiles.Replaced(text, "\"L2\"]", string.Join(',', Enumerable.Range(2, 5000).Select(i => $"\"L{i}\"")) + "]");

        var error = Problems.SingleErrorAt(ModelFiles.Read(text), "$.terms[2].factors[0].level");

        Problems.Contains("'M2' is not a level of 'g'", error);
        Problems.Contains("5002 levels", error);
        Assert.True(error.Reason.Length < 400, error.Reason);
    }
}
