using System.Collections.Immutable;

namespace Scorer.ModelFile.Tests;

/// <summary><see cref="ModelFileReader.Validate"/>: a document built in code is checked by the rules a file is checked by.</summary>
public sealed class DocumentValidationTests
{
    private static ModelDocument Read(string text) => ModelFiles.Read(text).Document!;

    [Fact]
    public void Document_read_from_a_valid_file_validates_without_problems()
    {
        var document = Read(ModelFiles.Minimal);

        Assert.Empty(ModelFileReader.Validate(document));
        ModelFileReader.EnsureValid(document);
    }

    [Fact]
    public void Changed_copy_of_a_valid_document_is_checked_again()
    {
        var document = Read(ModelFiles.Minimal);
        var copy = document with { Terms = document.Terms.SetItem(3, document.Terms[3] with { Name = "site_east" }) };

        var problems = ModelFileReader.Validate(copy);

        var error = Assert.Single(problems, p => p.Severity == ProblemSeverity.Error);
        Assert.Equal("$.terms[3].name", error.Path);
    }

    [Fact]
    public void Document_built_in_code_gets_its_warnings()
    {
        var document = Read(ModelFiles.Minimal) with { Covariance = null };

        var problems = ModelFileReader.Validate(document);

        Assert.Equal(["$"], problems.Select(p => p.Path));
        Assert.All(problems, p => Assert.Equal(ProblemSeverity.Warning, p.Severity));
        ModelFileReader.EnsureValid(document);
    }

    [Fact]
    public void EnsureValid_throws_listing_every_error()
    {
        var document = Read(ModelFiles.Minimal);
        var site = document.Features[1];
        var broken = document with
        {
            Features = document.Features.SetItem(1, site with { Reference = "south" }),
            Threshold = 1.5,
        };

        var ex = Assert.Throws<ModelFileException>(() => ModelFileReader.EnsureValid(broken));

        Assert.Equal(["$.features[1].reference", "$.threshold"], ex.Problems.Select(p => p.Path).Order(StringComparer.Ordinal));
    }

    [Fact]
    public void Covariance_that_is_not_positive_semi_definite_is_found_in_a_built_document()
    {
        var document = Read(ModelFiles.Minimal);
        var covariance = document.Covariance!.Value;
        ImmutableArray<double> Row(int i, int j, double v) => covariance[i].SetItem(j, v);
        var broken = document with
        {
            Covariance = covariance.SetItem(0, Row(0, 1, 0.5)).SetItem(1, Row(1, 0, 0.5)),
        };

        var error = Assert.Single(ModelFileReader.Validate(broken));

        Assert.Equal("$.covariance", error.Path);
    }

    [Theory]
    [InlineData(double.NaN)]
    [InlineData(double.PositiveInfinity)]
    public void Document_with_a_number_that_is_not_finite_is_reported_not_thrown(double value)
    {
        var document = Read(ModelFiles.Minimal);
        var broken = document with { Terms = document.Terms.SetItem(1, document.Terms[1] with { Coefficient = value }) };

        var error = Assert.Single(ModelFileReader.Validate(broken));

        Assert.Equal(ProblemSeverity.Error, error.Severity);
        Assert.Throws<ModelFileException>(() => ModelFileReader.EnsureValid(broken));
    }

    [Fact]
    public void Document_with_an_undefined_link_is_reported_not_thrown()
    {
        var broken = Read(ModelFiles.Minimal) with { Link = (LinkKind)7 };

        Assert.Equal(ProblemSeverity.Error, Assert.Single(ModelFileReader.Validate(broken)).Severity);
    }
}
