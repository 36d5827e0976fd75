using Scorer.Monitor.Reporting;
using Scorer.Statistics;

namespace Scorer.Monitor.Tests.Reporting;

/// <summary>
/// Every rule of the status table (docs/monitoring.md, "The status") on its own and at its boundary: a statistic just
/// inside a threshold leaves the status alone, one just beyond it sets it. The thresholds are the documented defaults
/// (the PSI bands 0.1 and 0.25 are common practice). The statistics are given directly, so each test isolates one rule.
/// </summary>
public sealed class StatusRulesTests
{
    private const string Model = "pump-bearing-failure";
    private static readonly MonitorOptions Defaults = new();
    private static readonly DateTimeOffset WindowStart = new(2026, 11, 1, 0, 0, 0, TimeSpan.Zero);

    /// <summary>A window with enough outcomes, every statistic in order: AUC well above the floor, slope and O/E at 1.</summary>
    private static CalibrationReport Report(int events = 200, int labelled = 2000, Interval? oe = null, FittedValue? slope = null, AucEstimate? auc = null) =>
        new(labelled, events, events, oe ?? new Interval(1, 0.9, 1.1), new FittedValue(0, 0.05, -0.1, 0.1), slope ?? new FittedValue(1, 0.05, 0.9, 1.1), 0,
            null, null, 0.08, new MurphyDecomposition(0.01, 0.02, 0.09, 0), 0.3, 0.01, [], auc ?? new AucEstimate(0.8, 0.02, 0.76, 0.84));

    private static DriftView Drift(double? score = 0.01, long rows = 5000, double feature = 0.01) =>
        new(score, new Dictionary<string, double> { ["vibration_rms"] = feature }, rows);

    private static ChartsView Charts(bool ewmaOut = false, params DateTimeOffset[] upSignals) => Charts(ewmaOut, upSignals.Length, upSignals);

    /// <summary>Charts whose upward chart kept <paramref name="upSignals"/> of <paramref name="upCount"/> signals.</summary>
    private static ChartsView Charts(bool ewmaOut, long upCount, DateTimeOffset[] upSignals) =>
        new(new CusumView(2, 0.5, 4.2, 100_000, 300, 2000, [.. upSignals.Select((t, i) => new ChartSignal(i + 1, t, 4.3, Guid.Empty))], upCount),
            new CusumView(0.5, 0.1, 4.1, 100_000, 300, 2000, [], 0), new EwmaView(ewmaOut ? 0.05 : 0.001, 0.02, 0.01, ewmaOut, 2000), 2000, WindowStart.AddDays(29), null);

    private static StatusJudgement Judge(CalibrationReport report, DriftView? drift = null, ChartsView? charts = null, MonitorOptions? options = null) =>
        StatusRules.Judge(Model, "30d", report, drift ?? Drift(), charts ?? Charts(), WindowStart, options ?? Defaults);

    [Fact]
    public void Statistics_in_order_are_fine_with_no_action_and_say_what_holds()
    {
        var j = Judge(Report());
        Assert.Equal(MonitorStatus.Fine, j.Status);
        Assert.Equal("fine", j.Name);
        Assert.Equal("none", j.ActionName);
        Assert.Equal("No action.", j.Advice);
        Assert.Contains(j.Reasons, r => r.StartsWith("Calibration and discrimination hold over 30d (2000 labelled predictions, 200 events)", StringComparison.Ordinal));
    }

    [Fact]
    public void The_four_statuses_have_codes_0_to_3_and_one_action_each()
    {
        Assert.Equal(["fine", "watch", "recalibrate", "refit-due"], StatusRules.Names);
        Assert.Equal(
            [MonitorAction.None, MonitorAction.Watch, MonitorAction.Recalibrate, MonitorAction.Refit],
            Enum.GetValues<MonitorStatus>().Select(StatusRules.ActionOf));
        Assert.Equal(["none", "watch", "recalibrate", "refit"], Enum.GetValues<MonitorAction>().Select(StatusRules.Name));
        Assert.Equal([0, 1, 2, 3], Enum.GetValues<MonitorStatus>().Select(s => (int)s));
    }

    [Fact]
    public void Below_MinEvents_events_or_non_events_nothing_is_judged_and_the_reason_says_how_many_are_needed()
    {
        // Even a fallen AUC and a broken slope are not judged on 49 events.
        var j = Judge(Report(events: 49, auc: new AucEstimate(0.3, 0.05, 0.2, 0.4), slope: new FittedValue(0.3, 0.05, 0.2, 0.4)));
        Assert.Equal(MonitorStatus.Fine, j.Status);
        Assert.Contains(j.Reasons, r => r.Contains("49 events and 1951 non-events; at least 50 of each", StringComparison.Ordinal));

        // 49 non-events: the same.
        Assert.Equal(MonitorStatus.Fine, Judge(Report(events: 1951, labelled: 2000, auc: new AucEstimate(0.3, 0.05, 0.2, 0.4))).Status);

        // 50 of each: judged.
        Assert.Equal(MonitorStatus.RefitDue, Judge(Report(events: 50, labelled: 100, auc: new AucEstimate(0.3, 0.05, 0.2, 0.4))).Status);
    }

    [Fact]
    public void An_AUC_interval_wholly_below_the_floor_is_refit_due_and_one_that_reaches_it_is_not()
    {
        var j = Judge(Report(auc: new AucEstimate(0.55, 0.02, 0.5, 0.5999)));
        Assert.Equal(MonitorStatus.RefitDue, j.Status);
        Assert.Equal(MonitorAction.Refit, j.Action);
        Assert.StartsWith("Refit due: discrimination fell", j.Advice, StringComparison.Ordinal);
        Assert.Contains(j.Reasons, r => r.StartsWith("AUC 0.55 (95% interval 0.5–0.6) lies below the floor 0.6", StringComparison.Ordinal));

        Assert.Equal(MonitorStatus.Fine, Judge(Report(auc: new AucEstimate(0.55, 0.02, 0.5, 0.6))).Status);
    }

    [Fact]
    public void A_model_of_its_own_floor_is_judged_against_that_floor()
    {
        var options = Defaults with { AucFloors = new Dictionary<string, double>(StringComparer.Ordinal) { [Model] = 0.8 } };
        Assert.Equal(MonitorStatus.RefitDue, Judge(Report(auc: new AucEstimate(0.75, 0.02, 0.7, 0.79)), options: options).Status);
        Assert.Equal(MonitorStatus.Fine, Judge(Report(auc: new AucEstimate(0.75, 0.02, 0.7, 0.79))).Status);
    }

    [Theory]
    [InlineData(0.3, 0.5, 0.79, "predictions are too extreme.")]
    [InlineData(1.6, 1.21, 1.9, "predictions are too timid.")]
    public void A_slope_interval_wholly_outside_the_tolerance_is_recalibrate_naming_the_direction(double estimate, double lower, double upper, string direction)
    {
        var j = Judge(Report(slope: new FittedValue(estimate, 0.1, lower, upper)));
        Assert.Equal(MonitorStatus.Recalibrate, j.Status);
        Assert.Equal("recalibrate", j.ActionName);
        Assert.StartsWith("Recalibration may suffice: discrimination holds (AUC 0.8)", j.Advice, StringComparison.Ordinal);
        Assert.Contains(j.Reasons, r => r.StartsWith("Calibration slope", StringComparison.Ordinal) && r.EndsWith(direction, StringComparison.Ordinal));
    }

    [Fact]
    public void A_slope_interval_that_excludes_1_and_reaches_the_tolerance_is_watch()
    {
        // Upper end exactly 0.8 = 1 − 0.2: not wholly outside; it excludes 1 and reaches the tolerance.
        var j = Judge(Report(slope: new FittedValue(0.7, 0.05, 0.6, 0.8)));
        Assert.Equal(MonitorStatus.Watch, j.Status);
        Assert.Contains(j.Reasons, r => r.Contains("excludes 1 and reaches the tolerance ±0.2", StringComparison.Ordinal));
        Assert.Equal(MonitorStatus.Watch, Judge(Report(slope: new FittedValue(1.15, 0.03, 1.09, 1.21))).Status); // crosses 1.2
        Assert.Equal(MonitorStatus.Fine, Judge(Report(slope: new FittedValue(1.05, 0.02, 1.0, 1.09))).Status); // reaches 1
    }

    [Fact]
    public void An_interval_that_excludes_1_but_lies_wholly_within_the_tolerance_is_fine_however_narrow()
    {
        // Millions of outcomes make any real model's intervals exclude 1; within the tolerance that is no problem.
        var slope = Judge(Report(slope: new FittedValue(1.05, 0.002, 1.046, 1.054)));
        Assert.Equal(MonitorStatus.Fine, slope.Status);
        Assert.Contains(slope.Reasons, r => r.Contains("excludes 1 but lies wholly within 0.8–1.2", StringComparison.Ordinal));
        var oe = Judge(Report(oe: new Interval(0.93, 0.925, 0.935)));
        Assert.Equal(MonitorStatus.Fine, oe.Status);
        Assert.Contains(oe.Reasons, r => r.Contains("excludes 1 but lies wholly within 0.8–1.2", StringComparison.Ordinal));

        // Just inside and just reaching the tolerance's end, on both sides.
        Assert.Equal(MonitorStatus.Fine, Judge(Report(oe: new Interval(1.1, 1.01, 1.1999))).Status);
        Assert.Equal(MonitorStatus.Watch, Judge(Report(oe: new Interval(1.1, 1.01, 1.2))).Status);
        Assert.Equal(MonitorStatus.Fine, Judge(Report(oe: new Interval(0.9, 0.8001, 0.99))).Status);
        Assert.Equal(MonitorStatus.Watch, Judge(Report(oe: new Interval(0.9, 0.8, 0.99))).Status);
    }

    [Fact]
    public void An_observed_expected_interval_wholly_outside_the_tolerance_is_recalibrate_and_within_it_watch()
    {
        var more = Judge(Report(oe: new Interval(1.4, 1.25, 1.55)));
        Assert.Equal(MonitorStatus.Recalibrate, more.Status);
        Assert.Contains(more.Reasons, r => r.EndsWith("events are more frequent than predicted.", StringComparison.Ordinal));
        var fewer = Judge(Report(oe: new Interval(0.6, 0.5, 0.79)));
        Assert.Equal(MonitorStatus.Recalibrate, fewer.Status);
        Assert.Contains(fewer.Reasons, r => r.EndsWith("events are rarer than predicted.", StringComparison.Ordinal));

        Assert.Equal(MonitorStatus.Watch, Judge(Report(oe: new Interval(1.1, 1.01, 1.2))).Status); // lower end 1.2 would be the tolerance
        Assert.Equal(MonitorStatus.Watch, Judge(Report(oe: new Interval(1.3, 1.2, 1.4))).Status); // touches 1.2: not wholly outside
    }

    [Fact]
    public void A_CUSUM_signal_inside_the_window_is_watch_and_one_before_it_is_not()
    {
        var j = Judge(Report(), charts: Charts(false, WindowStart.AddDays(3), WindowStart.AddDays(4)));
        Assert.Equal(MonitorStatus.Watch, j.Status);
        Assert.Contains(j.Reasons, r => r.StartsWith("The upward CUSUM (odds ratio 2) signalled 2 times over 30d", StringComparison.Ordinal));

        Assert.Equal(MonitorStatus.Fine, Judge(Report(), charts: Charts(false, WindowStart.AddSeconds(-1))).Status);
        Assert.Equal(MonitorStatus.Watch, Judge(Report(), charts: Charts(false, WindowStart)).Status); // the window's first instant counts
    }

    [Fact]
    public void When_older_signals_were_dropped_and_every_kept_one_is_inside_the_window_the_count_is_given_as_a_lower_bound()
    {
        // 5,000 signals in all, the last 2 kept (Scorer:Monitor:CusumSignalsKept), both inside the window.
        var j = Judge(Report(), charts: Charts(false, 5_000, [WindowStart.AddDays(3), WindowStart.AddDays(4)]));
        Assert.Contains(j.Reasons, r => r.StartsWith("The upward CUSUM (odds ratio 2) signalled at least 2 times over 30d", StringComparison.Ordinal));

        // One kept signal before the window: the kept ones reach past its start, so the count inside it is exact.
        j = Judge(Report(), charts: Charts(false, 5_000, [WindowStart.AddDays(-1), WindowStart.AddDays(4)]));
        Assert.Contains(j.Reasons, r => r.StartsWith("The upward CUSUM (odds ratio 2) signalled 1 time over 30d", StringComparison.Ordinal));
    }

    [Fact]
    public void An_EWMA_beyond_its_limit_is_watch()
    {
        var j = Judge(Report(), charts: Charts(ewmaOut: true));
        Assert.Equal(MonitorStatus.Watch, j.Status);
        Assert.Contains(j.Reasons, r => r.StartsWith("The EWMA of observed minus expected is 0.05, beyond its control limit ±0.02", StringComparison.Ordinal));
    }

    [Fact]
    public void PSI_above_the_watch_band_is_watch_above_the_large_band_refit_due_and_exactly_at_a_band_not_beyond_it()
    {
        Assert.Equal(MonitorStatus.Fine, Judge(Report(), Drift(score: 0.1)).Status);
        Assert.Equal(MonitorStatus.Watch, Judge(Report(), Drift(score: 0.1000001)).Status);
        Assert.Equal(MonitorStatus.Watch, Judge(Report(), Drift(score: 0.25)).Status);
        var large = Judge(Report(), Drift(feature: 0.2500001));
        Assert.Equal(MonitorStatus.RefitDue, large.Status);
        Assert.StartsWith("Refit due: the inputs moved away from the training data", large.Advice, StringComparison.Ordinal);
        Assert.Contains(large.Reasons, r => r.StartsWith("PSI of feature vibration_rms is 0.25 over 30d, above 0.25: a large shift", StringComparison.Ordinal));
        Assert.Contains(Judge(Report(), Drift(score: 0.3)).Reasons, r => r.StartsWith("PSI of the linear predictor is 0.3", StringComparison.Ordinal));
    }

    [Fact]
    public void PSI_is_not_judged_on_fewer_than_MinPsiRows_rows()
    {
        Assert.Equal(MonitorStatus.Fine, Judge(Report(), Drift(score: 0.9, rows: 499)).Status);
        Assert.Equal(MonitorStatus.RefitDue, Judge(Report(), Drift(score: 0.9, rows: 500)).Status);
    }

    [Fact]
    public void Refit_due_wins_over_recalibrate_which_wins_over_watch_and_every_reason_is_kept()
    {
        var broken = new FittedValue(0.5, 0.05, 0.4, 0.6);
        var all = Judge(Report(slope: broken, auc: new AucEstimate(0.55, 0.02, 0.5, 0.58)), Drift(score: 0.15), Charts(true));
        Assert.Equal(MonitorStatus.RefitDue, all.Status);
        Assert.Equal(4, all.Reasons.Count); // AUC, slope, EWMA, PSI

        var recalibrate = Judge(Report(slope: broken), Drift(score: 0.15), Charts(true));
        Assert.Equal(MonitorStatus.Recalibrate, recalibrate.Status);
        Assert.Equal(3, recalibrate.Reasons.Count);
    }

    [Fact]
    public void Without_an_AUC_the_recalibration_advice_does_not_quote_one()
    {
        var report = Report(slope: new FittedValue(0.5, 0.05, 0.4, 0.6)) with { Auc = null };
        var j = Judge(report);
        Assert.Equal(MonitorStatus.Recalibrate, j.Status);
        Assert.Equal("Recalibration may suffice: calibration does not hold. Request a recalibrated candidate and compare it in shadow.", j.Advice);
    }
}

/// <summary>
/// The calibration rules on seeded streams of invented predictions, from a thousand to ten million outcomes: a stream
/// drawn from its own probabilities stays fine at every size (statistical significance alone marks nothing), and
/// streams with O/E at 1.3 or the slope at 0.7 are caught once there is evidence. The statistics are the monitor's own
/// (checked against R elsewhere); these tests prove the rules, not the numbers.
/// </summary>
public sealed class StatusAtVolumeTests
{
    private static readonly MonitorOptions Defaults = new();

    /// <summary>n predictions with η ~ N(−1.5, 1), and outcomes drawn from p' = g(η), g the truth the test names.</summary>
    private static StatusJudgement Stream(int n, int seed, Func<double, double> truth)
    {
        var random = new Random(seed);
        var p = new double[n];
        var y = new byte[n];
        for (var i = 0; i < n; i++)
        {
            var eta = -1.5 + (Math.Sqrt(-2 * Math.Log(1 - random.NextDouble())) * Math.Cos(2 * Math.PI * random.NextDouble()));
            p[i] = 1 / (1 + Math.Exp(-eta));
            y[i] = random.NextDouble() < truth(eta) ? (byte)1 : (byte)0;
        }

        var report = CalibrationStatistics.Compute(p, y);
        return StatusRules.Judge("stream", "30d", report, new DriftView(null, new Dictionary<string, double>(), 0), null, DateTimeOffset.UnixEpoch, Defaults);
    }

    private static double Logistic(double eta) => 1 / (1 + Math.Exp(-eta));

    [Theory]
    [InlineData(1_000)]
    [InlineData(1_000_000)]
    [InlineData(10_000_000)]
    public void A_stream_drawn_from_its_own_probabilities_stays_fine_however_many_outcomes_it_has(int n)
    {
        var judgement = Stream(n, 11, Logistic);
        Assert.True(judgement.Status == MonitorStatus.Fine, string.Join(" ", judgement.Reasons));
    }

    [Theory]
    [InlineData(1_000_000)]
    [InlineData(10_000_000)]
    public void A_model_off_by_3_percent_stays_fine_although_its_narrow_interval_excludes_1(int n)
    {
        var judgement = Stream(n, 14, eta => Math.Min(1, 1.03 * Logistic(eta)));
        Assert.True(judgement.Status == MonitorStatus.Fine, string.Join(" ", judgement.Reasons));
        Assert.Contains(judgement.Reasons, r => r.StartsWith("Observed/expected", StringComparison.Ordinal) && r.Contains("excludes 1 but lies wholly within", StringComparison.Ordinal));
    }

    [Theory]
    [InlineData(100_000)]
    [InlineData(1_000_000)]
    public void A_stream_with_observed_expected_at_1_3_or_the_slope_at_0_7_is_caught_as_recalibrate(int n)
    {
        var moreEvents = Stream(n, 12, eta => Math.Min(1, 1.3 * Logistic(eta)));
        Assert.Equal(MonitorStatus.Recalibrate, moreEvents.Status);
        Assert.Contains(moreEvents.Reasons, r => r.StartsWith("Observed/expected", StringComparison.Ordinal));

        var tooExtreme = Stream(n, 13, eta => Logistic(-1.5 * 0.3 + (0.7 * eta)));
        Assert.Equal(MonitorStatus.Recalibrate, tooExtreme.Status);
        Assert.Contains(tooExtreme.Reasons, r => r.StartsWith("Calibration slope", StringComparison.Ordinal) && r.Contains("too extreme", StringComparison.Ordinal));
    }
}
