using Scorer.Engine.Scoring;
using Scorer.Engine.Tests.Support;

namespace Scorer.Engine.Tests;

public sealed class AllocationTests
{
    [Fact]
    public void Scoring_a_row_allocates_nothing_in_the_steady_state()
    {
        var model = CompiledModel.Compile(Models.Pump(maxSe: 10));
        NamedValue[] row = [new("vibration", 4.0), new("temp", FeatureValue.Missing), new("site", "river")];
        var dense = new[] { 4.0, 61.0, 2.0 };
        var contributions = new double[model.TermCount];
        var warnings = new RowWarning[model.MaxWarningsPerRow];
        var settings = ScoreSettings.Default;
        var sum = 0.0;
        for (var i = 0; i < 100; i++)
        {
            sum += model.Score(row, settings, contributions, warnings).Probability + model.ScoreFeatures(dense, settings).Upper;
        }

        var before = GC.GetAllocatedBytesForCurrentThread();
        for (var i = 0; i < 10_000; i++)
        {
            sum += model.Score(row, settings, contributions, warnings).Probability + model.ScoreFeatures(dense, settings).Upper;
        }

        var allocated = GC.GetAllocatedBytesForCurrentThread() - before;
        Assert.True(sum > 0);
        Assert.Equal(0, allocated);
    }
}
