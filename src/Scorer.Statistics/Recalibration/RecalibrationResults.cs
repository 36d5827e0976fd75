using Scorer.ModelFile;

namespace Scorer.Statistics.Recalibration;

/// <summary>What a recalibration re-estimates (Steyerberg et al. 2004; Vergouwe et al. 2017).</summary>
public enum RecalibrationKind
{
    /// <summary>Recalibration in the large: g(P(y = 1)) = a + η_old, the slope held at 1 (η_old an offset).</summary>
    InTheLarge,

    /// <summary>Logistic recalibration: g(P(y = 1)) = a + b·η_old.</summary>
    InterceptAndSlope,
}

/// <summary>
/// A recalibration fit of matured outcomes on the linear predictor η_old that the deployed model gave, with the model's
/// own link g: g(P(y = 1)) = a + b·η_old (b = 1 for <see cref="RecalibrationKind.InTheLarge"/>). Maximum likelihood by
/// Newton–Raphson; the standard errors and the covariance are those of the inverse Fisher (expected) information at the
/// estimate, as R's <c>vcov(glm(...))</c> gives them.
/// </summary>
/// <param name="Kind">What was fitted.</param>
/// <param name="Link">The link the fit used (it must be the model's own link to be applied to the model).</param>
/// <param name="Intercept">a.</param>
/// <param name="Slope">b (exactly 1 in the large).</param>
/// <param name="InterceptSe">The standard error of a.</param>
/// <param name="SlopeSe">The standard error of b (0 in the large: b is not estimated).</param>
/// <param name="Covariance">Cov(a, b) (0 in the large).</param>
/// <param name="Rows">The number of labelled rows n.</param>
/// <param name="Events">The number of events among them.</param>
/// <param name="LogLikelihood">The maximised log-likelihood Σ y ln μ + (1 − y) ln(1 − μ).</param>
/// <param name="NullLogLikelihood">
/// The log-likelihood of the intercept-only model without η (every μ = events/n), the same for both kinds.
/// </param>
/// <param name="Iterations">The Newton iterations taken.</param>
public sealed record RecalibrationFit(
    RecalibrationKind Kind,
    LinkKind Link,
    double Intercept,
    double Slope,
    double InterceptSe,
    double SlopeSe,
    double Covariance,
    int Rows,
    int Events,
    double LogLikelihood,
    double NullLogLikelihood,
    int Iterations);

/// <summary>A likelihood-ratio test of a smaller model against a larger one it is nested in.</summary>
/// <param name="Statistic">2·(ln L_larger − ln L_smaller), at least 0 (+∞ when the smaller model gives an outcome probability 0).</param>
/// <param name="Df">The degrees of freedom: the number of parameters the larger model adds.</param>
/// <param name="P">The upper tail of χ²(Df) at the statistic.</param>
public sealed record LikelihoodRatioTest(double Statistic, int Df, double P);

/// <summary>
/// The closed testing procedure of Vergouwe et al. (2017, Stat Med 36:4529) over three models: keep the deployed model
/// (a = 0, b = 1), recalibration in the large, and intercept-and-slope recalibration. Each less extensive model is
/// tested against the most extensive one, starting from the least extensive: first keep against intercept-and-slope
/// (<see cref="InterceptAndSlopeVsKeep"/>, 2 df); if that is not significant the model is kept. Otherwise in the large
/// against intercept-and-slope (<see cref="InterceptAndSlopeVsInTheLarge"/>, 1 df): significant means
/// intercept-and-slope, not significant means in the large. <see cref="InTheLargeVsKeep"/> (1 df) is reported for
/// information and does not take part in the decision.
/// </summary>
/// <param name="KeepLogLikelihood">The log-likelihood of the deployed model's own predictions on the outcomes.</param>
/// <param name="InTheLarge">The recalibration-in-the-large fit.</param>
/// <param name="InterceptAndSlope">The intercept-and-slope fit.</param>
/// <param name="InTheLargeVsKeep">In the large against keep (1 df).</param>
/// <param name="InterceptAndSlopeVsInTheLarge">Intercept-and-slope against in the large (1 df).</param>
/// <param name="InterceptAndSlopeVsKeep">Intercept-and-slope against keep (2 df): the closed test's first step.</param>
/// <param name="Alpha">The significance level of every step.</param>
/// <param name="Recommended">The recommended recalibration, or null to keep the deployed model as it is.</param>
/// <param name="Reason">The steps taken and their outcome, in words.</param>
public sealed record RecalibrationChoice(
    double KeepLogLikelihood,
    RecalibrationFit InTheLarge,
    RecalibrationFit InterceptAndSlope,
    LikelihoodRatioTest InTheLargeVsKeep,
    LikelihoodRatioTest InterceptAndSlopeVsInTheLarge,
    LikelihoodRatioTest InterceptAndSlopeVsKeep,
    double Alpha,
    RecalibrationKind? Recommended,
    string Reason)
{
    /// <summary>True when the closed test finds no evidence against the deployed model.</summary>
    public bool KeepModel => Recommended is null;

    /// <summary>The recommended fit, or null when the model is kept.</summary>
    public RecalibrationFit? RecommendedFit => Recommended switch
    {
        RecalibrationKind.InTheLarge => InTheLarge,
        RecalibrationKind.InterceptAndSlope => InterceptAndSlope,
        _ => null,
    };
}
