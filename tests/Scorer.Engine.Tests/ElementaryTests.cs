using Scorer.Engine.Numerics;
using Scorer.Engine.Tests.Support;

namespace Scorer.Engine.Tests;

public sealed class ElementaryTests
{
    [Fact]
    public void Expm1_and_log1p_agree_with_R_to_a_few_ulps_where_the_naive_formulas_fail()
    {
        // R's expm1 and log1p (C99 libm) from tests/reference/scoring-reference.R.
        foreach (var row in ReferenceData.Csv("elementary.csv"))
        {
            var x = ReferenceData.D(row["x"]);
            Tolerance.Relative(ReferenceData.D(row["expm1"]), Elementary.ExpM1(x), 1e-15, $"expm1({x:R})");
            Tolerance.Relative(ReferenceData.D(row["log1p"]), Elementary.Log1P(x), 1e-15, $"log1p({x:R})");
        }
    }
}
