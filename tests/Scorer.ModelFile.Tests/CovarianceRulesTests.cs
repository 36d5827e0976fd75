namespace Scorer.ModelFile.Tests;

/// <summary>The covariance of the coefficients: k × k in term order, symmetric, positive semi-definite.</summary>
public sealed class CovarianceRulesTests
{
    [Fact]
    public void Covariance_is_read_row_major_in_term_order()
    {
        var covariance = ModelFiles.Read(ModelFiles.Minimal).Document!.Covariance!.Value;

        Assert.Equal(4, covariance.Length);
        Assert.All(covariance, row => Assert.Equal(4, row.Length));
        Assert.Equal(0.25, covariance[0][0]);
        Assert.Equal(0.005, covariance[1][3]);
        Assert.Equal(0.16, covariance[3][3]);
    }

    [Fact]
    public void Covariance_with_too_few_rows_is_rejected()
    {
        var result = ModelFiles.ReadChanged(root => root["covariance"]!.AsArray().RemoveAt(3));

        var error = Problems.SingleErrorAt(result, "$.covariance");

        Problems.Contains("4 × 4", error);
    }

    [Fact]
    public void Covariance_with_too_many_rows_is_rejected()
    {
        var result = ModelFiles.ReadChanged(root => root["covariance"]!.AsArray().Add(ModelFiles.Json("[0, 0, 0, 0]")));

        Problems.SingleErrorAt(result, "$.covariance");
    }

    [Fact]
    public void Covariance_row_of_wrong_length_is_rejected_with_its_path()
    {
        var result = ModelFiles.ReadChanged(root => root["covariance"]![2]!.AsArray().RemoveAt(3));

        Problems.Contains("each row needs 4", Problems.SingleErrorAt(result, "$.covariance[2]"));
    }

    [Fact]
    public void Covariance_that_is_not_symmetric_is_rejected_with_its_path()
    {
        var error = Problems.SingleErrorAt(ModelFiles.ReadChanged(root => root["covariance"]![0]![2] = 0.02), "$.covariance[0][2]");

        Problems.Contains("not symmetric", error);
        Problems.Contains("$.covariance[2][0]", error);
    }

    [Fact]
    public void Covariance_asymmetric_only_in_the_last_digits_is_accepted()
    {
        var result = ModelFiles.ReadChanged(root => root["covariance"]![0]![2] = -0.020000000000001);

        Problems.None(result);
    }

    [Fact]
    public void Symmetry_tolerance_is_taken_from_the_options()
    {
        var text = ModelFiles.Changed(root => root["covariance"]![0]![2] = -0.0200001);

        Assert.False(ModelFiles.Read(text).IsValid);
        Assert.True(ModelFiles.Read(text, new ModelFileReaderOptions { SymmetryTolerance = 1e-4 }).IsValid);
    }

    [Fact]
    public void Covariance_that_is_not_positive_semi_definite_is_rejected()
    {
        // The block [[0.25, 0.5], [0.5, 0.04]] has determinant 0.01 - 0.25 < 0: one eigenvalue is negative.
        var result = ModelFiles.ReadChanged(root =>
        {
            root["covariance"]![0]![1] = 0.5;
            root["covariance"]![1]![0] = 0.5;
        });

        Problems.Contains("not positive semi-definite", Problems.SingleErrorAt(result, "$.covariance"));
    }

    [Fact]
    public void Negative_variance_is_rejected_with_its_path()
    {
        var result = ModelFiles.ReadChanged(root => root["covariance"]![1]![1] = -0.04);

        Problems.Contains("variance cannot be negative", Problems.SingleErrorAt(result, "$.covariance[1][1]"));
    }

    [Fact]
    public void Every_negative_variance_is_reported()
    {
        var result = ModelFiles.ReadChanged(root =>
        {
            root["covariance"]![1]![1] = -0.04;
            root["covariance"]![3]![3] = -0.16;
        });

        Assert.Equal(["$.covariance[1][1]", "$.covariance[3][3]"], result.Errors.Select(e => e.Path));
    }

    [Fact]
    public void Singular_covariance_is_accepted_with_a_warning()
    {
        // Terms 2 and 3 perfectly correlated: positive semi-definite, rank 3.
        var result = ModelFiles.ReadChanged(root => root["covariance"] = ModelFiles.Json("""
            [[0.25, 0, 0, 0], [0, 0.04, 0, 0], [0, 0, 0.09, 0.09], [0, 0, 0.09, 0.09]]
            """));

        Problems.WarningAt(result, "$.covariance", "singular");
    }

    [Fact]
    public void Covariance_entry_that_is_not_a_number_is_rejected_with_its_path()
    {
        var result = ModelFiles.ReadChanged(root => root["covariance"]![2]![2] = "0.09");

        Problems.SingleErrorAt(result, "$.covariance[2][2]");
    }
}
