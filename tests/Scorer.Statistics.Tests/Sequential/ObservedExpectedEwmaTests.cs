using Scorer.Statistics.Sequential;

namespace Scorer.Statistics.Tests.Sequential;

public class ObservedExpectedEwmaTests
{
    public static TheoryData<string> Cases => new(ReferenceCase.Names);

    // Reference: statistics.py's EWMA of O − E (Cook, Coory & Webster 2011 style; the variance recursion is from memory
    // in the reference README), λ = 0.01, Z_0 = Var_0 = 0.
    [Theory]
    [MemberData(nameof(Cases))]
    public void Path_and_standard_deviation_equal_the_reference(string name)
    {
        var c = ReferenceCase.Load(name);
        Assert.Equal(0.01, c.Number("ewma_lambda"));
        var z = c.Numbers("ewma");
        var sd = c.Numbers("ewma_sd");
        var ewma = new ObservedExpectedEwma();
        for (var t = 0; t < z.Length; t++)
        {
            var signalled = ewma.Add(c.Probabilities[t], c.Outcomes[t]);
            Assert.True(Math.Abs(z[t] - ewma.Value) <= 1e-12, $"{name} ewma[{t}]: {ewma.Value} vs {z[t]}");
            Assert.True(Math.Abs(sd[t] - ewma.Sd) <= 1e-12, $"{name} ewma_sd[{t}]: {ewma.Sd} vs {sd[t]}");
            // The out-of-control rule |Z| > 3 sd, applied to the reference's own Z and sd.
            Assert.Equal(Math.Abs(z[t]) > 3 * sd[t], signalled);
        }

        Assert.Equal(z.Length, ewma.Steps);
    }

    [Fact]
    public void Miscalibrated_model_goes_out_of_control_and_the_calibrated_one_stays_in()
    {
        // pima-miscalibrated has p' = plogis(−0.4 + 1.6 qlogis(p)), an over-confident model. In the reference paths
        // its |Z| first exceeds 3 sd at row 81, while pima-logit's never does in its 332 rows.
        foreach (var (name, expectOut, firstOut) in new[] { ("pima-logit", false, -1), ("pima-miscalibrated", true, 81) })
        {
            var c = ReferenceCase.Load(name);
            var ewma = new ObservedExpectedEwma();
            var first = -1;
            for (var t = 0; t < c.Probabilities.Length; t++)
            {
                if (ewma.Add(c.Probabilities[t], c.Outcomes[t]) && first < 0)
                {
                    first = t;
                }
            }

            Assert.Equal(expectOut, first >= 0);
            Assert.Equal(firstOut, first);
        }
    }

    [Fact]
    public void Save_and_restore_round_trip_exactly()
    {
        var c = ReferenceCase.Load("birthwt-probit");
        var original = new ObservedExpectedEwma(0.05, 2.5);
        for (var t = 0; t < 100; t++)
        {
            original.Add(c.Probabilities[t], c.Outcomes[t]);
        }

        var saved = original.Save();
        var restored = ObservedExpectedEwma.Restore(saved);
        Assert.Equal(saved, restored.Save());
        Assert.Equal(new EwmaState(0.05, 2.5, original.Value, original.Variance, 100), saved);
        for (var t = 100; t < c.Probabilities.Length; t++)
        {
            Assert.Equal(original.Add(c.Probabilities[t], c.Outcomes[t]), restored.Add(c.Probabilities[t], c.Outcomes[t]));
        }

        Assert.Equal(original.Save(), restored.Save());
    }

    [Fact]
    public void Bad_arguments_are_rejected_naming_the_parameter()
    {
        Assert.Equal("lambda", Assert.ThrowsAny<ArgumentException>(() => new ObservedExpectedEwma(0.0)).ParamName);
        Assert.Equal("lambda", Assert.ThrowsAny<ArgumentException>(() => new ObservedExpectedEwma(1.5)).ParamName);
        Assert.Equal("lambda", Assert.ThrowsAny<ArgumentException>(() => new ObservedExpectedEwma(double.NaN)).ParamName);
        Assert.Equal("limitSigmas", Assert.ThrowsAny<ArgumentException>(() => new ObservedExpectedEwma(0.01, 0.0)).ParamName);
        Assert.Equal("limitSigmas", Assert.ThrowsAny<ArgumentException>(() => new ObservedExpectedEwma(0.01, double.NaN)).ParamName);
        var ewma = new ObservedExpectedEwma();
        Assert.Equal("probability", Assert.ThrowsAny<ArgumentException>(() => ewma.Add(-0.1, 0)).ParamName);
        Assert.Equal("probability", Assert.ThrowsAny<ArgumentException>(() => ewma.Add(double.NaN, 0)).ParamName);
        Assert.Equal("outcome", Assert.ThrowsAny<ArgumentException>(() => ewma.Add(0.5, 3)).ParamName);
        Assert.Equal(0, ewma.Steps);
        Assert.Equal("state", Assert.ThrowsAny<ArgumentException>(
            () => ObservedExpectedEwma.Restore(new EwmaState(0.01, 3, 0, -1, 0))).ParamName);
        Assert.Equal("state", Assert.ThrowsAny<ArgumentException>(
            () => ObservedExpectedEwma.Restore(new EwmaState(0.0, 3, 0, 0, 0))).ParamName);
    }
}
