namespace Scorer.Statistics.Sequential;

/// <summary>
/// An exponentially weighted moving average of observed − expected, in the style of Cook, Coory &amp; Webster (2011):
/// Z_t = (1 − λ)·Z_{t−1} + λ·(y_t − p_t) with Z_0 = 0, and its in-control variance
/// Var_t = (1 − λ)²·Var_{t−1} + λ²·p_t(1 − p_t) with Var_0 = 0. The chart is out of control while |Z_t| &gt; L·√Var_t.
/// </summary>
/// <remarks>
/// Z &gt; 0 means more events than predicted (under-prediction), Z &lt; 0 fewer (over-prediction). The defaults
/// λ = 0.01 and L = 3 are common practice, not values from a paper. Unlike the CUSUM the EWMA is not reset.
/// </remarks>
public sealed class ObservedExpectedEwma
{
    private readonly double _decay;
    private readonly double _decaySquared;
    private readonly double _lambdaSquared;

    /// <summary>An EWMA at Z = 0 with no observations.</summary>
    /// <param name="lambda">The smoothing weight λ, in (0, 1].</param>
    /// <param name="limitSigmas">L, the control limit in standard deviations: finite and &gt; 0.</param>
    public ObservedExpectedEwma(double lambda = 0.01, double limitSigmas = 3)
    {
        if (!(lambda > 0.0 && lambda <= 1.0))
        {
            throw new ArgumentOutOfRangeException(nameof(lambda), lambda, "λ must be in (0, 1].");
        }

        if (!(limitSigmas > 0.0) || double.IsPositiveInfinity(limitSigmas))
        {
            throw new ArgumentOutOfRangeException(nameof(limitSigmas), limitSigmas, "The limit must be finite and greater than 0.");
        }

        Lambda = lambda;
        LimitSigmas = limitSigmas;
        _decay = 1.0 - lambda;
        _decaySquared = _decay * _decay;
        _lambdaSquared = lambda * lambda;
    }

    /// <summary>The smoothing weight λ.</summary>
    public double Lambda { get; }

    /// <summary>L, the control limit in standard deviations.</summary>
    public double LimitSigmas { get; }

    /// <summary>The current Z (observed − expected, smoothed).</summary>
    public double Value { get; private set; }

    /// <summary>The in-control variance of Z.</summary>
    public double Variance { get; private set; }

    /// <summary>The in-control standard deviation √Var of Z.</summary>
    public double Sd => Math.Sqrt(Variance);

    /// <summary>The number of outcomes added.</summary>
    public long Steps { get; private set; }

    /// <summary>Adds one matured outcome and updates Z and its variance.</summary>
    /// <param name="probability">The predicted probability p that was served, in [0, 1].</param>
    /// <param name="outcome">The observed outcome y, 0 or 1.</param>
    /// <returns>True when |Z| &gt; L·sd after the update.</returns>
    public bool Add(double probability, byte outcome)
    {
        SequentialArguments.Probability(probability, nameof(probability));
        SequentialArguments.Outcome(outcome, nameof(outcome));
        Value = _decay * Value + Lambda * (outcome - probability);
        Variance = _decaySquared * Variance + _lambdaSquared * probability * (1.0 - probability);
        Steps++;
        return Math.Abs(Value) > LimitSigmas * Sd;
    }

    /// <summary>The complete state, for persisting it.</summary>
    public EwmaState Save() => new(Lambda, LimitSigmas, Value, Variance, Steps);

    /// <summary>An EWMA in exactly the saved state.</summary>
    /// <param name="state">A state from <see cref="Save"/>.</param>
    public static ObservedExpectedEwma Restore(EwmaState state)
    {
        if (!(state.Lambda > 0.0 && state.Lambda <= 1.0) || !(state.LimitSigmas > 0.0) || double.IsPositiveInfinity(state.LimitSigmas)
            || !double.IsFinite(state.Value) || !(state.Variance >= 0.0) || double.IsPositiveInfinity(state.Variance) || state.Steps < 0)
        {
            throw new ArgumentException(
                "The saved EWMA state is invalid: it needs λ in (0, 1], a finite limit > 0, a finite value, a finite variance ≥ 0 and a step count ≥ 0.",
                nameof(state));
        }

        return new ObservedExpectedEwma(state.Lambda, state.LimitSigmas)
        {
            Value = state.Value,
            Variance = state.Variance,
            Steps = state.Steps,
        };
    }
}

/// <summary>The persisted state of an <see cref="ObservedExpectedEwma"/>.</summary>
/// <param name="Lambda">The smoothing weight λ.</param>
/// <param name="LimitSigmas">L, the control limit in standard deviations.</param>
/// <param name="Value">The current Z.</param>
/// <param name="Variance">The current in-control variance of Z.</param>
/// <param name="Steps">The number of outcomes added.</param>
public readonly record struct EwmaState(double Lambda, double LimitSigmas, double Value, double Variance, long Steps);
