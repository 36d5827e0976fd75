using Scorer.Statistics.Sequential;

namespace Scorer.Statistics.Tests.Sequential;

public class RiskAdjustedCusumTests
{
    public static TheoryData<string> Cases => new(ReferenceCase.Names);

    // The weight of Steiner, Cook, Farewell & Treasure (2000), Biostatistics 1(4):441–452, with R0 = 1:
    // W = y ln RA − ln(1 − p + RA p). The right-hand sides are that formula evaluated directly with Math.Log; the
    // literals are the same numbers from Python's math.log (printed with repr), as a second source.
    [Theory]
    [InlineData(0.15, 1, 2.0, 0.5533852381847867)]   // ln 2 − ln 1.15
    [InlineData(0.15, 0, 2.0, -0.13976194237515863)] // −ln 1.15
    [InlineData(0.15, 0, 0.5, 0.0779615414697118)]   // −ln 0.925
    [InlineData(0.15, 1, 0.5, -0.6151856390902335)]  // ln 0.5 − ln 0.925
    public void Weight_matches_the_published_formula(double p, byte y, double ra, double python)
    {
        var direct = (y * Math.Log(ra)) - Math.Log(1.0 - p + (ra * p));
        var weight = RiskAdjustedCusum.Weight(p, y, ra);
        Assert.Equal(direct, weight, 1e-15);
        Assert.Equal(python, weight, 1e-15);
    }

    [Fact]
    public void Weight_is_accurate_for_tiny_probabilities()
    {
        // −ln(1 + p) ≈ −p + p²/2 for p = 1e-12: a naive Math.Log(1 + p) would be off by about 1e-4 relative.
        var weight = RiskAdjustedCusum.Weight(1e-12, 0, 2.0);
        Assert.Equal(-1e-12 + 0.5e-24, weight, 1e-27);
    }

    [Theory]
    [MemberData(nameof(Cases))]
    public void Paths_without_reset_equal_the_reference_paths(string name)
    {
        var c = ReferenceCase.Load(name);
        foreach (var (ra, field) in new[] { (2.0, "cusum_up"), (0.5, "cusum_down") })
        {
            var expected = c.Numbers(field);
            var chart = new RiskAdjustedCusum(ra, double.PositiveInfinity);
            Assert.Equal(expected.Length, c.Probabilities.Length);
            for (var t = 0; t < expected.Length; t++)
            {
                Assert.False(chart.Add(c.Probabilities[t], c.Outcomes[t], out var statistic));
                Assert.Equal(statistic, chart.Value);
                Assert.True(Math.Abs(expected[t] - statistic) <= 1e-12, $"{name} {field}[{t}]: {statistic} vs {expected[t]}");
            }

            Assert.Equal(expected.Length, chart.Steps);
            Assert.Equal(0, chart.Signals);
        }
    }

    [Fact]
    public void Chart_signals_at_the_first_crossing_and_restarts_at_zero()
    {
        // Up to its first crossing of h the chart with a threshold follows the reference path (no reset) exactly;
        // at that step it signals with the path's value and restarts; afterwards it follows S = max(0, S + W) from 0.
        var c = ReferenceCase.Load("pima-logit");
        var path = c.Numbers("cusum_up");
        const double h = 2.5;
        var first = Array.FindIndex(path, s => s >= h);
        Assert.True(first > 0, "the reference path must cross h = 2.5 for this test to mean anything");

        var chart = new RiskAdjustedCusum(2.0, h);
        var mirror = 0.0;
        var signals = 0;
        for (var t = 0; t < path.Length; t++)
        {
            var signalled = chart.Add(c.Probabilities[t], c.Outcomes[t], out var statistic);
            if (t <= first)
            {
                Assert.Equal(path[t], statistic, 1e-12);
                Assert.Equal(t == first, signalled);
            }

            mirror = Math.Max(0.0, mirror + RiskAdjustedCusum.Weight(c.Probabilities[t], c.Outcomes[t], 2.0));
            Assert.Equal(mirror, statistic, 1e-12);
            if (mirror >= h)
            {
                Assert.True(signalled);
                Assert.Equal(0.0, chart.Value);
                mirror = 0.0;
                signals++;
            }
            else
            {
                Assert.False(signalled);
            }
        }

        Assert.Equal(signals, chart.Signals);
        Assert.True(signals >= 1);
    }

    [Fact]
    public void Save_and_restore_round_trip_exactly()
    {
        var c = ReferenceCase.Load("pima-miscalibrated");
        var original = new RiskAdjustedCusum(2.0, 2.5);
        const int half = 180; // by then this chart has signalled 3 times and is at S ≈ 0.84

        for (var t = 0; t < half; t++)
        {
            original.Add(c.Probabilities[t], c.Outcomes[t], out _);
        }

        var saved = original.Save();
        var restored = RiskAdjustedCusum.Restore(saved);
        Assert.Equal(saved, restored.Save());
        Assert.Equal(original.Value, restored.Value);
        Assert.Equal(original.Steps, restored.Steps);
        Assert.Equal(original.Signals, restored.Signals);
        Assert.True(original.Signals > 0 && original.Value > 0, "the saved state should be a non-trivial one");

        for (var t = half; t < c.Probabilities.Length; t++)
        {
            var a = original.Add(c.Probabilities[t], c.Outcomes[t], out var sa);
            var b = restored.Add(c.Probabilities[t], c.Outcomes[t], out var sb);
            Assert.Equal(a, b);
            Assert.Equal(sa, sb);
        }

        Assert.Equal(original.Save(), restored.Save());
    }

    [Fact]
    public void Restore_rejects_a_corrupt_state()
    {
        var good = new CusumState(2.0, 4.0, 1.0, 10, 0);
        Assert.Equal(good, RiskAdjustedCusum.Restore(good).Save());
        foreach (var bad in new[]
                 {
                     good with { Value = -1.0 }, good with { Value = double.NaN }, good with { Steps = -1 }, good with { Signals = -1 },
                     good with { OddsRatio = 1.0 }, good with { OddsRatio = 0.0 }, good with { Threshold = 0.0 },
                     good with { Threshold = double.NaN },
                 })
        {
            var e = Assert.ThrowsAny<ArgumentException>(() => RiskAdjustedCusum.Restore(bad));
            Assert.Equal("state", e.ParamName);
        }
    }

    [Theory]
    [InlineData(-0.01)]
    [InlineData(1.01)]
    [InlineData(double.NaN)]
    [InlineData(double.PositiveInfinity)]
    public void Probability_outside_the_unit_interval_is_rejected(double p)
    {
        var chart = new RiskAdjustedCusum(2.0, 4.0);
        Assert.Equal("probability", Assert.ThrowsAny<ArgumentException>(() => chart.Add(p, 0, out _)).ParamName);
        Assert.Equal("probability", Assert.ThrowsAny<ArgumentException>(() => RiskAdjustedCusum.Weight(p, 0, 2.0)).ParamName);
        Assert.Equal(0, chart.Steps);
        Assert.Equal(0.0, chart.Value);
    }

    [Fact]
    public void Outcome_other_than_zero_or_one_is_rejected()
    {
        var chart = new RiskAdjustedCusum(2.0, 4.0);
        Assert.Equal("outcome", Assert.ThrowsAny<ArgumentException>(() => chart.Add(0.2, 2, out _)).ParamName);
        Assert.Equal("outcome", Assert.ThrowsAny<ArgumentException>(() => RiskAdjustedCusum.Weight(0.2, 255, 2.0)).ParamName);
        Assert.Equal(0, chart.Steps);
    }

    [Theory]
    [InlineData(0.0)]
    [InlineData(-2.0)]
    [InlineData(1.0)]
    [InlineData(double.NaN)]
    [InlineData(double.PositiveInfinity)]
    public void Odds_ratio_that_is_not_positive_or_is_one_is_rejected(double ra)
    {
        Assert.Equal("oddsRatio", Assert.ThrowsAny<ArgumentException>(() => new RiskAdjustedCusum(ra, 4.0)).ParamName);
    }

    [Fact]
    public void Weight_accepts_an_odds_ratio_of_one_and_gives_zero()
    {
        // The weight itself is defined for R = 1 (it is 0); only a chart with R_A = 1 is refused.
        Assert.Equal(0.0, RiskAdjustedCusum.Weight(0.3, 1, 1.0));
        Assert.Equal("oddsRatio", Assert.ThrowsAny<ArgumentException>(() => RiskAdjustedCusum.Weight(0.3, 1, 0.0)).ParamName);
    }

    [Theory]
    [InlineData(0.0)]
    [InlineData(-1.0)]
    [InlineData(double.NaN)]
    [InlineData(double.NegativeInfinity)]
    public void Threshold_that_is_not_positive_is_rejected(double h)
    {
        Assert.Equal("threshold", Assert.ThrowsAny<ArgumentException>(() => new RiskAdjustedCusum(2.0, h)).ParamName);
        var chart = new RiskAdjustedCusum(2.0, 4.0);
        Assert.Equal("Threshold", Assert.ThrowsAny<ArgumentException>(() => chart.Threshold = h).ParamName);
        Assert.Equal(4.0, chart.Threshold);
    }
}

/// <summary>The false-alarm budget in time (Scorer:Monitor:CusumFalseAlarmDays): arithmetic of the rule, with its floor and boundaries.</summary>
public sealed class FalseAlarmBudgetTests
{
    private static readonly DateTimeOffset T0 = new(2026, 1, 1, 0, 0, 0, TimeSpan.Zero);

    [Fact]
    public void The_rate_is_outcomes_per_day_of_prediction_time_measured_over_at_least_a_day()
    {
        Assert.Equal(5_000, FalseAlarmBudget.RatePerDay(10_000, T0, T0.AddDays(2)), 1e-9);
        Assert.Equal(500, FalseAlarmBudget.RatePerDay(500, T0, T0.AddSeconds(3)), 1e-9); // a burst counts over a day
        Assert.Equal(500, FalseAlarmBudget.RatePerDay(500, T0, T0), 1e-9);
    }

    [Fact]
    public void The_run_length_is_rate_times_days_never_below_the_floor_and_the_floor_alone_when_off()
    {
        // A million outcomes a day and one false alarm a year: 365 million outcomes per false alarm.
        Assert.Equal(365e6, FalseAlarmBudget.RunLength(100_000, 365, 1e6), 1e-3);
        Assert.Equal(100_000, FalseAlarmBudget.RunLength(100_000, 365, 100)); // 36,500 is below the floor
        Assert.Equal(100_000, FalseAlarmBudget.RunLength(100_000, 0, 1e6)); // off
        Assert.Throws<ArgumentOutOfRangeException>(() => FalseAlarmBudget.RunLength(5, 365, 1));
        Assert.Throws<ArgumentOutOfRangeException>(() => FalseAlarmBudget.RunLength(100_000, -1, 1));
    }

    [Fact]
    public void The_thresholds_are_set_again_only_when_the_run_length_moved_by_more_than_a_quarter()
    {
        Assert.False(FalseAlarmBudget.Moved(100_000, 125_000));
        Assert.True(FalseAlarmBudget.Moved(100_000, 125_001));
        Assert.False(FalseAlarmBudget.Moved(100_000, 80_000));
        Assert.True(FalseAlarmBudget.Moved(100_000, 79_999));
        Assert.True(FalseAlarmBudget.Moved(0, 100_000)); // never set
    }
}

/// <summary>The outcome rate the false-alarm budget is set from: per hour of prediction time over the last week, bounded in size.</summary>
public sealed class OutcomeRateTests
{
    private static readonly DateTimeOffset T0 = new(2026, 1, 1, 0, 0, 0, TimeSpan.Zero);

    [Fact]
    public void A_busy_stream_counts_at_its_rate_over_days_whatever_its_recent_outcomes_span()
    {
        // 300,000 outcomes evenly over three days: 100,000 a day, though any 2,000 of them span under an hour.
        var rate = new OutcomeRate();
        for (var i = 0; i < 300_000; i++)
        {
            rate.Add(T0 + (TimeSpan.FromDays(3) * (i / 300_000.0)));
        }

        Assert.Equal(300_000, rate.Count);
        Assert.Equal(100_000, rate.PerDay, 100_000 * 1e-4);
    }

    [Fact]
    public void Counts_older_than_the_week_leave_the_rate_and_the_saved_state_stays_at_most_169_hours()
    {
        var rate = new OutcomeRate();
        for (var hour = 0; hour < 24 * 30; hour++)
        {
            // 100 an hour for 23 days, then 10 an hour for 7.
            for (var i = 0; i < (hour < 24 * 23 ? 100 : 10); i++)
            {
                rate.Add(T0.AddHours(hour + (i / 100.0)));
            }
        }

        var saved = rate.Save();
        // The newest hour (719) and the 168 before it: hour 551 still at 100, then 168 hours of 10, over the span from
        // hour 551's start to the last time (hour 719 and 0.09).
        Assert.Equal(169, saved.Hours.Length);
        Assert.Equal(1_780, rate.Count);
        Assert.Equal(1_780 / (168.09 / 24), rate.PerDay, 1e-6);
        var restored = OutcomeRate.Restore(saved);
        Assert.Equal(rate.Count, restored.Count);
        Assert.Equal(rate.PerDay, restored.PerDay);
    }

    [Fact]
    public void A_burst_counts_over_a_day_and_an_earlier_time_counts_in_the_newest_hour()
    {
        var rate = new OutcomeRate();
        Assert.Equal(0, rate.PerDay);
        for (var i = 0; i < 500; i++)
        {
            rate.Add(T0.AddSeconds(i * 0.01));
        }

        Assert.Equal(500, rate.PerDay, 1e-9);
        rate.Add(T0.AddHours(5));
        rate.Add(T0.AddHours(1)); // out of order: counted, in the newest hour
        Assert.Equal(502, rate.Count);
        Assert.Equal(2, rate.Save().Hours.Length);
    }
}
