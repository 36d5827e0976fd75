using System.Collections.Immutable;
using System.Text.Json;

namespace Scorer.ModelFile.Tests;

/// <summary>
/// Field-by-field equality of two documents. Record equality is not enough: <see cref="ImmutableArray{T}"/> and the
/// dictionaries compare by reference, and <see cref="JsonElement"/> by its document.
/// </summary>
internal static class DocumentAssert
{
    public static void Equal(ModelDocument expected, ModelDocument actual)
    {
        Assert.Equal(expected.Format, actual.Format);
        Assert.Equal(expected.Model, actual.Model);
        Assert.Equal(expected.Version, actual.Version);
        Assert.Equal(expected.Description, actual.Description);
        Assert.Equal(expected.Link, actual.Link);
        Assert.Equal(expected.Outcome, actual.Outcome);

        Assert.Equal(expected.Features.Length, actual.Features.Length);
        for (var i = 0; i < expected.Features.Length; i++)
        {
            var e = expected.Features[i];
            var a = actual.Features[i];
            Assert.Equal(e.Levels.ToArray(), a.Levels.ToArray());
            Assert.Equal(e with { Levels = a.Levels }, a);
        }

        Assert.Equal(expected.Terms.Length, actual.Terms.Length);
        for (var i = 0; i < expected.Terms.Length; i++)
        {
            var e = expected.Terms[i];
            var a = actual.Terms[i];
            Assert.Equal(e.Name, a.Name);
            Assert.Equal(BitConverter.DoubleToInt64Bits(e.Coefficient), BitConverter.DoubleToInt64Bits(a.Coefficient));
            Assert.Equal(e.Factors.ToArray(), a.Factors.ToArray());
        }

        Assert.Equal(expected.Covariance is null, actual.Covariance is null);
        if (expected.Covariance is { } ec && actual.Covariance is { } ac)
        {
            Assert.Equal(ec.Length, ac.Length);
            for (var i = 0; i < ec.Length; i++)
            {
                Assert.Equal(ec[i].ToArray(), ac[i].ToArray());
            }
        }

        Assert.Equal(expected.Threshold, actual.Threshold);
        Assert.Equal(expected.Sampling, actual.Sampling);
        BaselineEqual(expected.Baseline, actual.Baseline);

        Assert.Equal(expected.Fit is null, actual.Fit is null);
        if (expected.Fit is { } ef && actual.Fit is { } af)
        {
            Assert.True(JsonElement.DeepEquals(ef, af), $"fit differs: {ef.GetRawText()} vs {af.GetRawText()}");
        }

        Assert.Equal(expected.Extensions.Keys.Order(StringComparer.Ordinal), actual.Extensions.Keys.Order(StringComparer.Ordinal));
        foreach (var (name, value) in expected.Extensions)
        {
            Assert.True(JsonElement.DeepEquals(value, actual.Extensions[name]), $"extension {name} differs");
        }
    }

    private static void BaselineEqual(BaselineSpec? expected, BaselineSpec? actual)
    {
        Assert.Equal(expected is null, actual is null);
        if (expected is null || actual is null)
        {
            return;
        }

        Assert.Equal(expected.N, actual.N);
        Assert.Equal(expected.Events, actual.Events);
        Assert.Equal(expected.MaxSe, actual.MaxSe);
        BinsEqual(expected.LinearPredictor, actual.LinearPredictor);

        Assert.Equal(expected.Numeric.Keys.Order(StringComparer.Ordinal), actual.Numeric.Keys.Order(StringComparer.Ordinal));
        foreach (var (name, bins) in expected.Numeric)
        {
            BinsEqual(bins, actual.Numeric[name]);
        }

        Assert.Equal(expected.Levels.Keys.Order(StringComparer.Ordinal), actual.Levels.Keys.Order(StringComparer.Ordinal));
        foreach (var (name, levels) in expected.Levels)
        {
            Assert.Equal(levels.OrderBy(l => l.Key, StringComparer.Ordinal), actual.Levels[name].OrderBy(l => l.Key, StringComparer.Ordinal));
        }
    }

    private static void BinsEqual(BinnedBaseline? expected, BinnedBaseline? actual)
    {
        Assert.Equal(expected is null, actual is null);
        if (expected is not null && actual is not null)
        {
            Assert.Equal(expected.Edges.ToArray(), actual.Edges.ToArray());
            Assert.Equal(expected.Proportions.ToArray(), actual.Proportions.ToArray());
        }
    }
}
