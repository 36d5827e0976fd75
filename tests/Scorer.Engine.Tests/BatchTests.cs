using Scorer.Engine.Scoring;
using Scorer.Engine.Tests.Support;
using Scorer.ModelFile;

namespace Scorer.Engine.Tests;

public sealed class BatchTests
{
    [Theory]
    [InlineData("birthwt-cloglog")]
    [InlineData("infert-probit")]
    [InlineData("birthwt-logit")]
    public void The_dense_batch_agrees_with_R_predict_glm_row_for_row(string name)
    {
        // Same reference as ReferenceScoringTests (R glm + predict.glm, se.fit = TRUE), through the SIMD block path.
        var model = CompiledModel.Compile(ReferenceData.Model(name));
        var dataset = name[..name.IndexOf('-', StringComparison.Ordinal)];
        var rows = ReferenceData.Csv($"{dataset}.rows.csv");
        var expected = ReferenceData.Csv($"{name}.expected.csv");
        var dense = new double[rows.Count * model.FeatureCount];
        for (var r = 0; r < rows.Count; r++)
        {
            for (var f = 0; f < model.FeatureCount; f++)
            {
                var cell = rows[r][model.FeatureNames[f]];
                dense[(r * model.FeatureCount) + f] = model.FeatureKindOf(f) == FeatureKind.Numeric ? ReferenceData.D(cell) : model.Levels(f).ToList().IndexOf(cell);
            }
        }

        var results = new ScoredRow[rows.Count];
        model.ScoreBatch(dense, results, ScoreSettings.Default);
        for (var r = 0; r < rows.Count; r++)
        {
            Tolerance.Relative(ReferenceData.D(expected[r]["eta"]), results[r].Eta, 1e-9, $"row {r + 1} eta");
            Tolerance.Relative(ReferenceData.D(expected[r]["se"]), results[r].Se, 1e-9, $"row {r + 1} se");
            Tolerance.Relative(ReferenceData.D(expected[r]["lower95"]), results[r].Lower, 1e-9, $"row {r + 1} lower");
            Tolerance.Relative(ReferenceData.D(expected[r]["upper95"]), results[r].Upper, 1e-9, $"row {r + 1} upper");
        }
    }

    [Fact]
    public void Failed_rows_in_a_batch_get_their_error_and_the_others_score_as_alone()
    {
        var model = CompiledModel.Compile(Models.Pump(tempMissing: MissingPolicy.Reject));
        // 11 rows (not a whole number of blocks of 8); rows 2 and 9 fail (log of a negative value, missing temperature).
        var rows = Enumerable.Range(0, 11).Select(i => new[] { 1.0 + i, 40.0 + i, i % 3 }).ToArray();
        rows[2][0] = -1;
        rows[9][1] = double.NaN;
        rows[10][0] = 13; // above the training maximum of 12
        var results = new ScoredRow[rows.Length];
        var warnings = new RowWarning[rows.Length * model.MaxWarningsPerRow];
        model.ScoreBatch(rows.SelectMany(r => r).ToArray(), results, ScoreSettings.Default, warnings);
        for (var i = 0; i < rows.Length; i++)
        {
            var alone = model.ScoreFeatures(rows[i], ScoreSettings.Default);
            Assert.Equal(alone.Error, results[i].Error);
            if (!alone.Failed)
            {
                Assert.Equal(alone.Eta, results[i].Eta, 13);
                Assert.Equal(alone.Se, results[i].Se, 13);
                Assert.Equal(alone.WarningCount, results[i].WarningCount);
            }
        }

        Assert.Equal(RowErrorKind.OutsideTransformDomain, results[2].Error.Kind);
        Assert.Equal(RowErrorKind.MissingValue, results[9].Error.Kind);
        Assert.Equal(RowWarningKind.AboveTrainingRange, warnings[(10 * model.MaxWarningsPerRow)].Kind);
    }
}
