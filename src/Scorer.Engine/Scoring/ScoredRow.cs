namespace Scorer.Engine.Scoring;

/// <summary>
/// The score of one row. Without a covariance (or when the band was not asked for) <see cref="Se"/>,
/// <see cref="Lower"/>, <see cref="Upper"/> and <see cref="ProbabilitySe"/> are NaN.
/// </summary>
public struct ScoredRow
{
    /// <summary>Linear predictor η = x'β.</summary>
    public double Eta;

    /// <summary>Standard error of η: √(x'Vx).</summary>
    public double Se;

    /// <summary>g⁻¹(η).</summary>
    public double Probability;

    /// <summary>g⁻¹(η − z·se): lower end of the Wald band, built on the link scale.</summary>
    public double Lower;

    /// <summary>g⁻¹(η + z·se).</summary>
    public double Upper;

    /// <summary>Delta-method standard error of the probability, |dμ/dη|·se.</summary>
    public double ProbabilitySe;

    /// <summary>1 when the probability is at or above the model's threshold, 0 below, -1 when the model has no threshold.</summary>
    public sbyte Flag;

    /// <summary>Number of warnings written for this row.</summary>
    public int WarningCount;

    /// <summary>Set when the row could not be scored; the numbers are then NaN.</summary>
    public RowError Error;

    public readonly bool Failed => Error.IsError;

    public readonly bool? FlagValue => Flag < 0 ? null : Flag == 1;
}

/// <summary>What to compute: the band (and at which level) or only the point score.</summary>
public readonly struct ScoreSettings
{
    private ScoreSettings(double level, double z, bool band)
    {
        Level = level;
        Z = z;
        Band = band;
    }

    public double Level { get; }

    /// <summary>Φ⁻¹(1 − α/2) for the level.</summary>
    public double Z { get; }

    public bool Band { get; }

    public static ScoreSettings Default { get; } = WithBand(0.95);

    public static ScoreSettings PointOnly { get; } = new(double.NaN, double.NaN, false);

    public static ScoreSettings WithBand(double level) => new(level, Numerics.Quantiles.TwoSidedZ(level), true);
}
