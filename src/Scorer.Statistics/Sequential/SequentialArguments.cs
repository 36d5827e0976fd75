namespace Scorer.Statistics.Sequential;

/// <summary>Argument checks shared by the sequential charts and the run-length calculations. Each throws an
/// <see cref="ArgumentOutOfRangeException"/> (an <see cref="ArgumentException"/>) naming the parameter.</summary>
internal static class SequentialArguments
{
    public static void Probability(double probability, string name)
    {
        // The negated form also rejects NaN.
        if (!(probability >= 0.0 && probability <= 1.0))
        {
            throw new ArgumentOutOfRangeException(name, probability, "A probability must be in [0, 1].");
        }
    }

    public static void Probabilities(ReadOnlySpan<double> probabilities, string name)
    {
        if (probabilities.IsEmpty)
        {
            throw new ArgumentException("At least one predicted probability is needed.", name);
        }

        for (var i = 0; i < probabilities.Length; i++)
        {
            if (!(probabilities[i] >= 0.0 && probabilities[i] <= 1.0))
            {
                throw new ArgumentOutOfRangeException(name, probabilities[i], $"Element {i} is not a probability in [0, 1].");
            }
        }
    }

    public static void Outcome(byte outcome, string name)
    {
        if (outcome > 1)
        {
            throw new ArgumentOutOfRangeException(name, outcome, "An outcome must be 0 or 1.");
        }
    }

    /// <summary>A chart's odds ratio: finite, &gt; 0 and ≠ 1 (a chart with R_A = 1 never moves).</summary>
    public static void OddsRatio(double oddsRatio, string name)
    {
        if (!(oddsRatio > 0.0) || double.IsPositiveInfinity(oddsRatio) || oddsRatio == 1.0)
        {
            throw new ArgumentOutOfRangeException(name, oddsRatio, "The chart's odds ratio must be finite, greater than 0 and different from 1.");
        }
    }

    /// <summary>A true (data-generating) odds ratio: finite and &gt; 0; 1 means in control.</summary>
    public static void TrueOddsRatio(double oddsRatio, string name)
    {
        if (!(oddsRatio > 0.0) || double.IsPositiveInfinity(oddsRatio))
        {
            throw new ArgumentOutOfRangeException(name, oddsRatio, "The true odds ratio must be finite and greater than 0.");
        }
    }

    public static void Threshold(double threshold, string name, bool allowInfinity)
    {
        if (!(threshold > 0.0) || (!allowInfinity && double.IsPositiveInfinity(threshold)))
        {
            throw new ArgumentOutOfRangeException(name, threshold,
                allowInfinity ? "The threshold must be greater than 0." : "The threshold must be finite and greater than 0.");
        }
    }
}
