using Scorer.Engine.Numerics;

namespace Scorer.Statistics.Sequential;

/// <summary>
/// One risk-adjusted Bernoulli CUSUM chart (Steiner, Cook, Farewell &amp; Treasure 2000, Biostatistics 1(4):441–452)
/// with R₀ = 1: it tests "the odds are the model's odds" against "the odds are <see cref="OddsRatio"/> times the
/// model's odds". Each matured outcome adds the log-likelihood-ratio weight
/// W = y·ln R_A − ln(1 − p + R_A·p); the statistic is S = max(0, S + W), and the chart signals when S ≥ h,
/// after which S restarts at 0.
/// </summary>
/// <remarks>
/// An odds ratio above 1 (2 is the usual choice) makes an upward chart that signals under-prediction (more events than
/// the model predicts); below 1 (0.5) a downward chart that signals over-prediction. Run two charts to watch both
/// directions. Choose the threshold with <see cref="RunLength.ThresholdFor"/>.
/// </remarks>
public sealed class RiskAdjustedCusum
{
    private double _threshold;

    /// <summary>A chart at S = 0 with no observations.</summary>
    /// <param name="oddsRatio">R_A, the odds ratio the chart is tuned to detect: finite, &gt; 0 and ≠ 1.</param>
    /// <param name="threshold">h &gt; 0; <see cref="double.PositiveInfinity"/> gives a chart that never signals.</param>
    public RiskAdjustedCusum(double oddsRatio, double threshold)
    {
        SequentialArguments.OddsRatio(oddsRatio, nameof(oddsRatio));
        SequentialArguments.Threshold(threshold, nameof(threshold), allowInfinity: true);
        OddsRatio = oddsRatio;
        _threshold = threshold;
    }

    /// <summary>R_A, the odds ratio the chart is tuned to detect.</summary>
    public double OddsRatio { get; }

    /// <summary>The signal threshold h (&gt; 0, may be +∞). It may be changed between observations, e.g. after the
    /// threshold is recomputed from recent predictions.</summary>
    public double Threshold
    {
        get => _threshold;
        set
        {
            SequentialArguments.Threshold(value, nameof(Threshold), allowInfinity: true);
            _threshold = value;
        }
    }

    /// <summary>The current statistic S (≥ 0); 0 right after a signal.</summary>
    public double Value { get; private set; }

    /// <summary>The number of outcomes added since the chart was created (signals do not reset it).</summary>
    public long Steps { get; private set; }

    /// <summary>The number of signals since the chart was created.</summary>
    public int Signals { get; private set; }

    /// <summary>
    /// The CUSUM weight W = y·ln R − ln(1 − p + R·p) of Steiner et al. (2000) with R₀ = 1, where ln(1 − p + R·p) is
    /// evaluated as ln(1 + (R − 1)·p) without cancellation.
    /// </summary>
    /// <param name="probability">The model's predicted probability p, in [0, 1].</param>
    /// <param name="outcome">The observed outcome y, 0 or 1.</param>
    /// <param name="oddsRatio">R, finite and &gt; 0 (1 gives weight 0).</param>
    public static double Weight(double probability, byte outcome, double oddsRatio)
    {
        SequentialArguments.Probability(probability, nameof(probability));
        SequentialArguments.Outcome(outcome, nameof(outcome));
        if (!(oddsRatio > 0) || double.IsPositiveInfinity(oddsRatio))
        {
            throw new ArgumentOutOfRangeException(nameof(oddsRatio), oddsRatio, "The odds ratio must be finite and greater than 0.");
        }

        return WeightUnchecked(probability, outcome, oddsRatio);
    }

    /// <summary>The weight without argument checks; the same expression as the reference script
    /// (w₀ = −log1p((R − 1)p), w₁ = ln R + w₀).</summary>
    internal static double WeightUnchecked(double probability, byte outcome, double oddsRatio)
    {
        var w0 = -Elementary.Log1P((oddsRatio - 1.0) * probability);
        return outcome == 1 ? Math.Log(oddsRatio) + w0 : w0;
    }

    /// <summary>
    /// Adds one matured outcome: S ← max(0, S + W). When S ≥ <see cref="Threshold"/> the chart signals, counts the
    /// signal and restarts at S = 0.
    /// </summary>
    /// <param name="probability">The predicted probability p that was served, in [0, 1].</param>
    /// <param name="outcome">The observed outcome y, 0 or 1.</param>
    /// <param name="statistic">S after this outcome, before any reset (so it is ≥ h when the method returns true).</param>
    /// <returns>True when this outcome made the chart signal.</returns>
    public bool Add(double probability, byte outcome, out double statistic)
    {
        SequentialArguments.Probability(probability, nameof(probability));
        SequentialArguments.Outcome(outcome, nameof(outcome));
        statistic = Math.Max(0.0, Value + WeightUnchecked(probability, outcome, OddsRatio));
        Steps++;
        if (statistic >= _threshold)
        {
            Signals++;
            Value = 0.0;
            return true;
        }

        Value = statistic;
        return false;
    }

    /// <summary>The chart's complete state, for persisting it.</summary>
    public CusumState Save() => new(OddsRatio, _threshold, Value, Steps, Signals);

    /// <summary>A chart in exactly the saved state.</summary>
    /// <param name="state">A state from <see cref="Save"/>.</param>
    public static RiskAdjustedCusum Restore(CusumState state)
    {
        if (!double.IsFinite(state.Value) || state.Value < 0 || state.Steps < 0 || state.Signals < 0
            || !(state.OddsRatio > 0) || double.IsPositiveInfinity(state.OddsRatio) || state.OddsRatio == 1.0
            || !(state.Threshold > 0))
        {
            throw new ArgumentException(
                "The saved CUSUM state is invalid: it needs an odds ratio that is finite, > 0 and ≠ 1, a threshold > 0, a finite value ≥ 0 and non-negative counts.",
                nameof(state));
        }

        return new RiskAdjustedCusum(state.OddsRatio, state.Threshold)
        {
            Value = state.Value,
            Steps = state.Steps,
            Signals = state.Signals,
        };
    }
}

/// <summary>The persisted state of a <see cref="RiskAdjustedCusum"/> chart.</summary>
/// <param name="OddsRatio">R_A, the odds ratio the chart detects.</param>
/// <param name="Threshold">The signal threshold h.</param>
/// <param name="Value">The current statistic S.</param>
/// <param name="Steps">The number of outcomes added.</param>
/// <param name="Signals">The number of signals.</param>
public readonly record struct CusumState(double OddsRatio, double Threshold, double Value, long Steps, int Signals);
