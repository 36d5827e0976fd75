namespace Scorer.Statistics.Sequential;

/// <summary>
/// Run lengths of the risk-adjusted CUSUM (<see cref="RiskAdjustedCusum"/>): the Markov-chain approximation of
/// Brook &amp; Evans (1972) as used by Steiner, Cook, Farewell &amp; Treasure (2000), the threshold that gives a target
/// in-control average run length (ARL₀), and a plain seeded simulation to check them.
/// </summary>
/// <remarks>
/// <para>
/// The predicted probabilities stand for the population the chart will see: each observation draws p uniformly from
/// them, and y ~ Bernoulli(p) in control, or y ~ Bernoulli(p₁) with p₁ = R·p / (1 − p + R·p) when the true odds are R
/// times the model's. Pass the model's own recent predictions.
/// </para>
/// <para>
/// Discretisation (the convention of tests/reference/calibration/statistics.py): [0, h) is cut into M intervals of
/// width w = h/M, state j is represented by its midpoint (j + ½)w, the chart starts in state 0 (which also holds the
/// atom at S = 0), and a step to s = max(0, (j + ½)w + W) goes to state floor(s / w), or signals when that is ≥ M.
/// ARL = the first element of (I − Q)⁻¹·1, counting the signalling observation. At M = 500 this comes out about
/// 0.25% below simulation (tests/reference/calibration/README.md), and, with M fixed, it is a step function of h that
/// is not exactly monotone at the scale of 0.1%.
/// </para>
/// </remarks>
public static class RunLength
{
    /// <summary>The default number of Markov-chain states.</summary>
    public const int DefaultStates = 500;

    private const int MaxStates = 2_000; // for small h the band is the whole matrix: 2,000 × 3,999 doubles (64 MB), twice while solving
    private const double BracketTolerance = 1e-10;
    private const int MaxHalvings = 6;   // down to h = 0.5/64: shorter targets are below any chart's ARL0 in practice
    private const int MaxDoublings = 30;

    /// <summary>
    /// Markov-chain ARL of the chart with odds ratio <paramref name="chartOddsRatio"/> and threshold h, from S = 0,
    /// when the true odds ratio is <paramref name="trueOddsRatio"/> (1 = in control), with p drawn from
    /// <paramref name="probabilities"/>. +∞ when the chart cannot signal (e.g. every p is 0).
    /// </summary>
    /// <param name="probabilities">The predicted probabilities (non-empty, each in [0, 1]).</param>
    /// <param name="chartOddsRatio">The chart's R_A: finite, &gt; 0 and ≠ 1.</param>
    /// <param name="threshold">h: finite and &gt; 0.</param>
    /// <param name="trueOddsRatio">The true odds ratio relative to the model: finite and &gt; 0.</param>
    /// <param name="states">M, the number of chain states (2 to 2,000).</param>
    public static double Average(ReadOnlySpan<double> probabilities, double chartOddsRatio, double threshold, double trueOddsRatio = 1.0,
        int states = DefaultStates)
    {
        var chain = Chain(probabilities, chartOddsRatio, states);
        SequentialArguments.Threshold(threshold, nameof(threshold), allowInfinity: false);
        SequentialArguments.TrueOddsRatio(trueOddsRatio, nameof(trueOddsRatio));
        return chain.AverageRunLength(threshold, trueOddsRatio, states);
    }

    /// <summary>
    /// The threshold h whose Markov-chain in-control ARL is <paramref name="targetInControlRunLength"/>, found by
    /// bisection, with the in-control ARL it reaches and the ARL under the chart's own odds ratio (the expected
    /// detection delay of a chart at S = 0).
    /// </summary>
    /// <remarks>
    /// The bracketing copies the reference script so that results are comparable: lo = 0.5, hi = 2.5; while
    /// ARL₀(hi) &lt; target, lo = hi and hi = 2·hi; then bisect, keeping ARL₀(lo) &lt; target ≤ ARL₀(hi), until
    /// hi − lo ≤ 1e-10, and return (lo + hi)/2. (If already ARL₀(0.5) ≥ target, which the reference does not allow,
    /// the bracket is halved downwards instead, at most 6 times.) Because ARL₀(h) is a step function with steps of up to about 0.1%, the
    /// in-control ARL reached may be below the target by up to about 0.1%.
    /// </remarks>
    /// <param name="probabilities">The predicted probabilities (non-empty, each in [0, 1]).</param>
    /// <param name="chartOddsRatio">The chart's R_A: finite, &gt; 0 and ≠ 1.</param>
    /// <param name="targetInControlRunLength">The wanted ARL₀, e.g. 100,000 labelled predictions: finite and &gt; 1.</param>
    /// <param name="states">M, the number of chain states (2 to 2,000).</param>
    /// <exception cref="ArgumentException">The target cannot be reached (the chart cannot signal, or the target is
    /// shorter than the chart's shortest ARL).</exception>
    public static ThresholdChoice ThresholdFor(ReadOnlySpan<double> probabilities, double chartOddsRatio, double targetInControlRunLength,
        int states = DefaultStates)
    {
        var chain = Chain(probabilities, chartOddsRatio, states);
        var target = targetInControlRunLength;
        if (!(target > 1.0) || double.IsPositiveInfinity(target))
        {
            throw new ArgumentOutOfRangeException(nameof(targetInControlRunLength), target, "The target run length must be finite and greater than 1.");
        }

        double InControl(double h) => chain.AverageRunLength(h, 1.0, states);

        // The reference's bracket. ARL0(2.5) is evaluated first: for the usual targets (ARL0(2.5) < target) the bracket
        // then only grows, and the costly evaluation at h = 0.5 (where every state can reach every other) is not needed.
        double lo = 0.5, hi = 2.5;
        var arlHi = InControl(hi);
        if (double.IsPositiveInfinity(arlHi))
        {
            throw new ArgumentException("The chart cannot signal under these probabilities (for example all are 0, or all are 1).", nameof(probabilities));
        }

        if (arlHi >= target)
        {
            // The reference requires ARL0(0.5) < target; for shorter targets the bracket moves down by halving.
            for (var halvings = 0; InControl(lo) >= target; halvings++)
            {
                if (halvings == MaxHalvings)
                {
                    throw new ArgumentOutOfRangeException(nameof(targetInControlRunLength), target,
                        $"The target is shorter than the in-control run length the chart has even at h = {lo:G3}.");
                }

                hi = lo;
                lo *= 0.5;
            }
        }
        else
        {
            for (var doublings = 0; arlHi < target; doublings++)
            {
                if (doublings == MaxDoublings)
                {
                    throw new ArgumentOutOfRangeException(nameof(targetInControlRunLength), target, $"No threshold up to {hi:G3} reaches the target.");
                }

                lo = hi;
                hi *= 2.0;
                arlHi = InControl(hi);
            }
        }

        while (hi - lo > BracketTolerance)
        {
            var mid = 0.5 * (lo + hi);
            if (mid <= lo || mid >= hi)
            {
                break;
            }

            if (InControl(mid) < target)
            {
                lo = mid;
            }
            else
            {
                hi = mid;
            }
        }

        var threshold = 0.5 * (lo + hi);
        return new ThresholdChoice(threshold, InControl(threshold), chain.AverageRunLength(threshold, chartOddsRatio, states), states,
            probabilities.Length);
    }

    /// <summary>
    /// Markov-chain expected detection delay when the change comes after <paramref name="changeAfter"/> in-control
    /// observations of a chart that started at S = 0 and restarted at 0 after each (false) signal, as a deployed
    /// chart does: the number of observations from the first out-of-control one up to and including the first signal
    /// after the change. With <paramref name="changeAfter"/> = 0 it is <see cref="Average"/> under
    /// <paramref name="trueOddsRatio"/>; for a long in-control stretch it is the steady-state delay, which is shorter,
    /// because the chart is then usually somewhat above 0 when the change comes.
    /// </summary>
    /// <remarks>The state distribution is propagated one observation at a time until it stops changing (to 1e-13), so
    /// the cost is that of about one ARL evaluation plus O(M·b) per in-control observation up to convergence.</remarks>
    /// <param name="probabilities">The predicted probabilities (non-empty, each in [0, 1]).</param>
    /// <param name="chartOddsRatio">The chart's R_A: finite, &gt; 0 and ≠ 1.</param>
    /// <param name="threshold">h: finite and &gt; 0.</param>
    /// <param name="trueOddsRatio">The true odds ratio after the change: finite and &gt; 0.</param>
    /// <param name="changeAfter">The number of in-control observations before the change, ≥ 0.</param>
    /// <param name="states">M, the number of chain states (2 to 2,000).</param>
    public static double DelayAfterChange(ReadOnlySpan<double> probabilities, double chartOddsRatio, double threshold, double trueOddsRatio,
        long changeAfter, int states = DefaultStates)
    {
        var chain = Chain(probabilities, chartOddsRatio, states);
        SequentialArguments.Threshold(threshold, nameof(threshold), allowInfinity: false);
        SequentialArguments.TrueOddsRatio(trueOddsRatio, nameof(trueOddsRatio));
        ArgumentOutOfRangeException.ThrowIfNegative(changeAfter);

        var delays = chain.Transitions(threshold, trueOddsRatio, states).RunLengths();
        var inControl = chain.Transitions(threshold, 1.0, states);
        var distribution = new double[states];
        var next = new double[states];
        distribution[0] = 1.0;
        for (long t = 0; t < changeAfter; t++)
        {
            inControl.Propagate(distribution, next);
            var staying = 0.0;
            foreach (var mass in next)
            {
                staying += mass;
            }

            next[0] += 1.0 - staying; // the signalled mass restarts at S = 0
            var change = 0.0;
            for (var j = 0; j < states; j++)
            {
                change += Math.Abs(next[j] - distribution[j]);
            }

            (distribution, next) = (next, distribution);
            if (change < 1e-13)
            {
                break; // stationary to rounding
            }
        }

        var delay = 0.0;
        for (var j = 0; j < states; j++)
        {
            if (distribution[j] != 0.0)
            {
                delay += distribution[j] * delays[j];
            }
        }

        return delay;
    }

    /// <summary>
    /// A plain seeded Monte Carlo simulation of the run length: each run starts at S = 0; each observation draws p
    /// uniformly from <paramref name="probabilities"/> and y ~ Bernoulli(p₁) (p₁ = p in control); the run ends at the
    /// first S ≥ h (that observation counted) or is censored at <paramref name="cap"/> steps (counted as cap).
    /// </summary>
    /// <param name="probabilities">The predicted probabilities (non-empty, each in [0, 1]).</param>
    /// <param name="chartOddsRatio">The chart's R_A: finite, &gt; 0 and ≠ 1.</param>
    /// <param name="threshold">h: finite and &gt; 0.</param>
    /// <param name="trueOddsRatio">The true odds ratio: finite and &gt; 0 (1 = in control).</param>
    /// <param name="runs">The number of runs, ≥ 2.</param>
    /// <param name="seed">The generator's seed; the same seed gives the same result.</param>
    /// <param name="cap">The longest run simulated, ≥ 1.</param>
    /// <returns>The mean run length and its standard error SD/√runs.</returns>
    public static (double Mean, double StandardError) Simulate(ReadOnlySpan<double> probabilities, double chartOddsRatio, double threshold,
        double trueOddsRatio, int runs, int seed, long cap = 10_000_000)
    {
        SequentialArguments.Probabilities(probabilities, nameof(probabilities));
        SequentialArguments.OddsRatio(chartOddsRatio, nameof(chartOddsRatio));
        SequentialArguments.Threshold(threshold, nameof(threshold), allowInfinity: false);
        SequentialArguments.TrueOddsRatio(trueOddsRatio, nameof(trueOddsRatio));
        ArgumentOutOfRangeException.ThrowIfLessThan(runs, 2);
        ArgumentOutOfRangeException.ThrowIfLessThan(cap, 1L);

        var n = probabilities.Length;
        var weight0 = new double[n];
        var weight1 = new double[n];
        var eventProbability = new double[n];
        for (var i = 0; i < n; i++)
        {
            weight0[i] = RiskAdjustedCusum.WeightUnchecked(probabilities[i], 0, chartOddsRatio);
            weight1[i] = RiskAdjustedCusum.WeightUnchecked(probabilities[i], 1, chartOddsRatio);
            eventProbability[i] = CusumChain.EventProbability(probabilities[i], trueOddsRatio);
        }

        var random = new SeededRandom(seed);
        double mean = 0.0, sumSquares = 0.0; // Welford
        for (var r = 1; r <= runs; r++)
        {
            var s = 0.0;
            long t = 0;
            while (t < cap)
            {
                t++;
                var i = random.NextIndex(n);
                s += random.NextDouble() < eventProbability[i] ? weight1[i] : weight0[i];
                if (s < 0.0)
                {
                    s = 0.0;
                }

                if (s >= threshold)
                {
                    break;
                }
            }

            var delta = t - mean;
            mean += delta / r;
            sumSquares += delta * (t - mean);
        }

        return (mean, Math.Sqrt(sumSquares / (runs - 1) / runs));
    }

    private static CusumChain Chain(ReadOnlySpan<double> probabilities, double chartOddsRatio, int states)
    {
        SequentialArguments.Probabilities(probabilities, nameof(probabilities));
        SequentialArguments.OddsRatio(chartOddsRatio, nameof(chartOddsRatio));
        if (states < 2 || states > MaxStates)
        {
            throw new ArgumentOutOfRangeException(nameof(states), states, $"The number of states must be between 2 and {MaxStates}.");
        }

        return new CusumChain(probabilities, chartOddsRatio);
    }
}

/// <summary>A CUSUM threshold chosen for a target in-control ARL (<see cref="RunLength.ThresholdFor"/>).</summary>
/// <param name="Threshold">h.</param>
/// <param name="InControlRunLength">The Markov-chain in-control ARL at h (the target to within about 0.1%: the chain is a step function of h).</param>
/// <param name="DetectionDelay">The Markov-chain ARL at h when the true odds ratio is the chart's own R_A, from S = 0:
/// the expected delay of a chart that is at 0 when the change comes (an upper bound for a chart that has been running).</param>
/// <param name="States">M, the number of chain states used.</param>
/// <param name="SampleSize">The number of predicted probabilities the chain averaged over.</param>
public sealed record ThresholdChoice(double Threshold, double InControlRunLength, double DetectionDelay, int States, int SampleSize);
