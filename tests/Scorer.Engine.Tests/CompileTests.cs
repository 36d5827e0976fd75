using Scorer.Engine.Tests.Support;
using Scorer.ModelFile;

namespace Scorer.Engine.Tests;

public sealed class CompileTests
{
    [Fact]
    public void A_document_built_in_code_is_checked_by_the_model_file_rules_before_it_compiles()
    {
        var doc = Models.Pump() with
        {
            Terms = [.. Models.Pump().Terms, new TermSpec("pressure", 0.1, [new FactorSpec { Feature = "pressure" }])],
        };
        var ex = Assert.Throws<ModelFileException>(() => CompiledModel.Compile(doc));
        Assert.Contains(ex.Problems, p => p.Path == "$.terms[6].factors[0].feature" && p.Reason.Contains("'pressure' is not a declared feature", StringComparison.Ordinal));
        Assert.Contains(ex.Problems, p => p.Path == "$.covariance");
    }

    [Fact]
    public void Compiling_keeps_distinct_numeric_columns_once_when_terms_share_them()
    {
        var model = CompiledModel.Compile(Models.Pump());
        // log(vibration) appears in two terms; temp in one: two numeric columns, two indicators.
        Assert.Equal(2, model.ColFeature.Length);
        Assert.Equal(2, model.IndicatorFeature.Length);
        Assert.True(model.FactorIsTriangular);
    }
}
