using Scorer.Statistics.Sequential;

namespace Scorer.Statistics.Tests.Sequential;

/// <summary>
/// The Markov-chain run lengths against tests/reference/calibration/statistics.py (Brook &amp; Evans 1972 as used by
/// Steiner et al. 2000, solved there with numpy.linalg.solve), and against simulation.
/// </summary>
public class RunLengthReferenceTests
{
    // The reference README measures the M = 500 midpoint chain at about 0.25% below a 400,000-run simulation
    // (pima-logit: ARL0 366.76 vs 367.67 ± 0.55, ARL1 51.65 vs 51.73 ± 0.06). Comparisons of the chain with a
    // simulation therefore allow 3 standard errors plus this known bias, rounded up to 0.3%.
    private const double DiscretisationBias = 0.003;

    public static TheoryData<string> Cases => new(ReferenceCase.Names);

    private static double Relative(double a, double b) => Math.Abs(a - b) / Math.Abs(b);

    [Theory]
    [MemberData(nameof(Cases))]
    public void Markov_run_lengths_at_h_2_5_equal_the_reference(string name)
    {
        var c = ReferenceCase.Load(name);
        var h = c.Number("cusum_h");
        Assert.Equal(2.5, h);
        var arl0 = RunLength.Average(c.Probabilities, 2.0, h);
        var arl1 = RunLength.Average(c.Probabilities, 2.0, h, trueOddsRatio: 2.0);
        Assert.True(Relative(arl0, c.Number("arl0_markov")) <= 1e-9, $"{name} ARL0 {arl0:R} vs {c.Number("arl0_markov"):R}");
        Assert.True(Relative(arl1, c.Number("arl1_markov")) <= 1e-9, $"{name} ARL1 {arl1:R} vs {c.Number("arl1_markov"):R}");
    }

    [Theory]
    [MemberData(nameof(Cases))]
    public void Threshold_for_an_in_control_run_length_of_1000_equals_the_reference(string name)
    {
        var c = ReferenceCase.Load(name);
        var choice = RunLength.ThresholdFor(c.Probabilities, 2.0, 1000.0);
        Assert.True(Math.Abs(choice.Threshold - c.Number("h_for_arl0_1000")) <= 1e-6,
            $"{name} h {choice.Threshold:R} vs {c.Number("h_for_arl0_1000"):R}");
        Assert.True(Relative(choice.InControlRunLength, c.Number("arl0_at_h_for_arl0_1000")) <= 1e-9,
            $"{name} ARL0 at h {choice.InControlRunLength:R} vs {c.Number("arl0_at_h_for_arl0_1000"):R}");
        Assert.True(Relative(choice.DetectionDelay, c.Number("arl1_at_h_for_arl0_1000")) <= 1e-9,
            $"{name} ARL1 at h {choice.DetectionDelay:R} vs {c.Number("arl1_at_h_for_arl0_1000"):R}");
        // The chain is a step function of h, so the bisection lands within a step (~0.05%) of the target.
        Assert.True(Math.Abs(choice.InControlRunLength - 1000.0) < 1.0, $"{name} ARL0 at h = {choice.InControlRunLength}");
        Assert.Equal(500, choice.States);
        Assert.Equal(c.Probabilities.Length, choice.SampleSize);
    }

    [Theory]
    [MemberData(nameof(Cases))]
    public void Reference_simulation_contains_the_markov_value_within_its_error_and_the_discretisation_bias(string name)
    {
        // statistics.py's simulation: 20,000 runs with numpy's PCG64 (README: "only to show that the Markov chain is
        // right"), so about 0.7% standard error for ARL0.
        var c = ReferenceCase.Load(name);
        var arl0 = RunLength.Average(c.Probabilities, 2.0, 2.5);
        var arl1 = RunLength.Average(c.Probabilities, 2.0, 2.5, trueOddsRatio: 2.0);
        Assert.True(Math.Abs(arl0 - c.Number("arl0_sim")) <= (3 * c.Number("arl0_sim_se")) + (DiscretisationBias * arl0),
            $"{name} ARL0 {arl0} vs simulation {c.Number("arl0_sim")} ± {c.Number("arl0_sim_se")}");
        Assert.True(Math.Abs(arl1 - c.Number("arl1_sim")) <= (3 * c.Number("arl1_sim_se")) + (DiscretisationBias * arl1),
            $"{name} ARL1 {arl1} vs simulation {c.Number("arl1_sim")} ± {c.Number("arl1_sim_se")}");
    }

    [Fact]
    public void Own_simulation_agrees_with_the_markov_chain_for_the_upward_chart()
    {
        // Monte Carlo budget: ARL0 ≈ 367 with SD ≈ ARL (run lengths are roughly geometric), 10,000 runs → SE ≈ 1%,
        // 3.7 million steps; ARL1 ≈ 52 with SD ≈ 35 (reference: SE 0.25 at 20,000 runs), 40,000 runs → SE ≈ 0.34%,
        // 2 million steps.
        var p = ReferenceCase.Load("pima-logit").Probabilities;
        foreach (var (trueOdds, runs, seed) in new[] { (1.0, 10_000, 101), (2.0, 40_000, 102) })
        {
            var markov = RunLength.Average(p, 2.0, 2.5, trueOdds);
            var (mean, se) = RunLength.Simulate(p, 2.0, 2.5, trueOdds, runs, seed);
            Assert.True(Math.Abs(mean - markov) <= (3 * se) + (DiscretisationBias * markov),
                $"true odds {trueOdds}: simulated {mean} ± {se}, Markov {markov}");
            Assert.True(se < 0.012 * mean, $"the standard error {se} is larger than budgeted");
        }
    }

    [Fact]
    public void Own_simulation_agrees_with_the_markov_chain_for_the_downward_chart()
    {
        // The downward chart (R_A = 0.5): the y = 0 weight −ln(1 − p/2) is positive and the y = 1 weight negative, so the
        // chain's band is shaped differently; no reference values exist, so the check is against simulation.
        // Monte Carlo budget as above: h = 2.5 gives ARL0 ≈ 400 (SD ≈ ARL0), 8,000 runs → SE ≈ 1.1%, 3.2 million steps;
        // for the improvement (true odds halved) ARL1 ≈ 62, 20,000 runs → SE well under 1%, 1.2 million steps.
        var p = ReferenceCase.Load("pima-logit").Probabilities;
        const double h = 2.5;
        var arl0 = RunLength.Average(p, 0.5, h);
        var arl1 = RunLength.Average(p, 0.5, h, 0.5);
        Assert.InRange(arl0, 100, 1_000);
        Assert.True(arl1 < arl0 / 4, $"ARL1 {arl1} should be far shorter than ARL0 {arl0}");
        foreach (var (trueOdds, markov, runs, seed) in new[] { (1.0, arl0, 8_000, 201), (0.5, arl1, 20_000, 202) })
        {
            var (mean, se) = RunLength.Simulate(p, 0.5, h, trueOdds, runs, seed);
            Assert.True(Math.Abs(mean - markov) <= (3 * se) + (DiscretisationBias * markov),
                $"true odds {trueOdds}: simulated {mean} ± {se}, Markov {markov}");
        }
    }

    [Fact]
    public void Simulation_is_reproducible_from_its_seed()
    {
        var p = ReferenceCase.Load("birthwt-probit").Probabilities;
        var a = RunLength.Simulate(p, 2.0, 2.0, 1.0, 200, 7);
        var b = RunLength.Simulate(p, 2.0, 2.0, 1.0, 200, 7);
        var other = RunLength.Simulate(p, 2.0, 2.0, 1.0, 200, 8);
        Assert.Equal(a, b);
        Assert.NotEqual(a.Mean, other.Mean);
    }

    [Fact]
    public void Simulation_counts_censored_runs_at_the_cap()
    {
        // With every p = 0 the upward chart never moves, so every run is censored at the cap.
        var (mean, se) = RunLength.Simulate([0.0, 0.0], 2.0, 1.0, 1.0, 10, 1, cap: 250);
        Assert.Equal(250.0, mean);
        Assert.Equal(0.0, se);
    }

    [Fact]
    public void Repeated_and_reordered_probabilities_give_the_same_run_length()
    {
        // The chain averages over the empirical distribution of p, so the sample twice over, in another order, is
        // the same distribution (identical values are grouped internally).
        var p = ReferenceCase.Load("pima-cloglog").Probabilities;
        var twice = p.Concat(p.Reverse()).ToArray();
        foreach (var trueOdds in new[] { 1.0, 2.0 })
        {
            var once = RunLength.Average(p, 2.0, 3.0, trueOdds);
            var doubled = RunLength.Average(twice, 2.0, 3.0, trueOdds);
            Assert.True(Relative(doubled, once) <= 1e-12, $"{doubled:R} vs {once:R}");
        }
    }

    [Fact]
    public void Delay_after_no_in_control_stretch_is_the_zero_state_run_length()
    {
        var p = ReferenceCase.Load("pima-logit").Probabilities;
        var zeroState = RunLength.Average(p, 2.0, 3.0, 2.0);
        Assert.True(Relative(RunLength.DelayAfterChange(p, 2.0, 3.0, 2.0, 0), zeroState) <= 1e-14);
        // After one in-control observation the chart may be above 0, so the delay can only be shorter (the CUSUM
        // from a higher start signals no later), and after a long stretch it is shorter still.
        var afterOne = RunLength.DelayAfterChange(p, 2.0, 3.0, 2.0, 1);
        var afterMany = RunLength.DelayAfterChange(p, 2.0, 3.0, 2.0, 10_000);
        Assert.True(afterOne < zeroState && afterMany < afterOne, $"{zeroState}, {afterOne}, {afterMany}");
    }

    [Fact]
    public void Tiny_threshold_signals_at_the_first_event_so_the_run_length_is_geometric()
    {
        // With h below every y = 1 weight (ln 2 − ln(1 + p) ≥ 0.12 on birthwt-probit, whose largest p is 0.77; not on
        // pima-logit, whose largest p is 0.997) and every y = 0 weight negative, the upward
        // chart signals at the first event and not before: the run length is geometric with success probability
        // mean(p) in control (elementary probability, from memory), and mean(p₁) with p₁ = 2p/(1 + p) under doubled odds.
        var p = ReferenceCase.Load("birthwt-probit").Probabilities;
        var meanP = p.Average();
        var meanP1 = p.Select(x => 2 * x / (1 + x)).Average();
        Assert.Equal(1 / meanP, RunLength.Average(p, 2.0, 0.01, 1.0, states: 50), 1e-10);
        Assert.Equal(1 / meanP1, RunLength.Average(p, 2.0, 0.01, 2.0, states: 50), 1e-10);
    }

    [Fact]
    public void Threshold_for_a_target_below_the_reference_bracket_is_found_by_halving()
    {
        // ARL0(0.5) ≈ 12 on pima-logit, so a target of 6 needs h < 0.5, outside the reference's starting bracket.
        // M = 100 keeps it fast (at small h every state reaches every other); the chain's steps in h are coarse there,
        // so the target is met to 2%.
        var p = ReferenceCase.Load("pima-logit").Probabilities;
        var choice = RunLength.ThresholdFor(p, 2.0, 6.0, states: 100);
        Assert.InRange(choice.Threshold, 0.0625, 0.5);
        Assert.InRange(choice.InControlRunLength, 6.0 * 0.98, 6.0 * 1.02);
        // Shorter than the 1/mean(p) ≈ 3.02 of the smallest threshold: unreachable.
        var e = Assert.ThrowsAny<ArgumentException>(() => RunLength.ThresholdFor(p, 2.0, 2.0, states: 50));
        Assert.Equal("targetInControlRunLength", e.ParamName);
    }

    [Fact]
    public void A_chart_that_cannot_signal_has_an_infinite_run_length()
    {
        // Every p = 0: y is always 0 and the upward chart's weight −ln(1 + 0) is 0, so S stays at 0 for ever.
        Assert.Equal(double.PositiveInfinity, RunLength.Average([0.0, 0.0, 0.0], 2.0, 2.0));
        var e = Assert.ThrowsAny<ArgumentException>(() => RunLength.ThresholdFor([0.0, 0.0], 2.0, 1000));
        Assert.Equal("probabilities", e.ParamName);
    }

    [Fact]
    public void Bad_arguments_are_rejected_naming_the_parameter()
    {
        double[] p = [0.1, 0.2, 0.3];
        void Check(string parameter, Action action) => Assert.Equal(parameter, Assert.ThrowsAny<ArgumentException>(action).ParamName);

        Check("probabilities", () => RunLength.Average([], 2.0, 2.0));
        Check("probabilities", () => RunLength.Average([0.1, double.NaN], 2.0, 2.0));
        Check("probabilities", () => RunLength.Average([0.1, 1.5], 2.0, 2.0));
        Check("probabilities", () => RunLength.ThresholdFor([-0.1], 2.0, 100));
        Check("probabilities", () => RunLength.Simulate([2.0], 2.0, 2.0, 1.0, 10, 1));
        Check("chartOddsRatio", () => RunLength.Average(p, 1.0, 2.0));
        Check("chartOddsRatio", () => RunLength.Average(p, 0.0, 2.0));
        Check("chartOddsRatio", () => RunLength.ThresholdFor(p, -1.0, 100));
        Check("chartOddsRatio", () => RunLength.Simulate(p, double.NaN, 2.0, 1.0, 10, 1));
        Check("threshold", () => RunLength.Average(p, 2.0, 0.0));
        Check("threshold", () => RunLength.Average(p, 2.0, -1.0));
        Check("threshold", () => RunLength.Average(p, 2.0, double.PositiveInfinity));
        Check("threshold", () => RunLength.Simulate(p, 2.0, double.NaN, 1.0, 10, 1));
        Check("threshold", () => RunLength.DelayAfterChange(p, 2.0, 0.0, 2.0, 10));
        Check("trueOddsRatio", () => RunLength.Average(p, 2.0, 2.0, 0.0));
        Check("trueOddsRatio", () => RunLength.Simulate(p, 2.0, 2.0, -2.0, 10, 1));
        Check("states", () => RunLength.Average(p, 2.0, 2.0, 1.0, 1));
        Check("states", () => RunLength.ThresholdFor(p, 2.0, 100, 0));
        Check("targetInControlRunLength", () => RunLength.ThresholdFor(p, 2.0, 1.0));
        Check("targetInControlRunLength", () => RunLength.ThresholdFor(p, 2.0, double.NaN));
        Check("targetInControlRunLength", () => RunLength.ThresholdFor(p, 2.0, double.PositiveInfinity));
        Check("runs", () => RunLength.Simulate(p, 2.0, 2.0, 1.0, 1, 1));
        Check("cap", () => RunLength.Simulate(p, 2.0, 2.0, 1.0, 10, 1, 0));
        Check("changeAfter", () => RunLength.DelayAfterChange(p, 2.0, 2.0, 2.0, -1));
    }
}
