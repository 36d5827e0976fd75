namespace Scorer.Statistics;

/// <summary>A point estimate with the lower and upper ends of its confidence interval.</summary>
/// <param name="Estimate">The point estimate.</param>
/// <param name="Lower">The lower end of the interval.</param>
/// <param name="Upper">The upper end of the interval.</param>
public readonly record struct Interval(double Estimate, double Lower, double Upper);

/// <summary>A fitted coefficient with its standard error and Wald interval (estimate ∓ z·se).</summary>
/// <param name="Estimate">The maximum-likelihood estimate.</param>
/// <param name="Se">Its standard error, from the inverse observed information at the estimate.</param>
/// <param name="Lower">Estimate − z·Se.</param>
/// <param name="Upper">Estimate + z·Se.</param>
public readonly record struct FittedValue(double Estimate, double Se, double Lower, double Upper);

/// <summary>
/// One non-empty bin of the reliability table (sklearn's <c>calibration_curve</c>, strategy "uniform"): the bins are
/// [0, e₁], (e₁, e₂], ..., (e_{k−1}, 1] with e_i = i·(1/k) evaluated in double.
/// </summary>
/// <param name="Bin">The 0-based bin index.</param>
/// <param name="Lower">The bin's lower edge e_b (0 for the first bin).</param>
/// <param name="Upper">The bin's upper edge e_{b+1} (1 for the last bin).</param>
/// <param name="Count">The number of cases in the bin (at least 1).</param>
/// <param name="Events">The number of those cases with outcome 1.</param>
/// <param name="MeanPredicted">The mean predicted probability, summed in row order.</param>
/// <param name="ObservedRate">Events / Count.</param>
/// <param name="WilsonLower">The lower end of the Wilson score interval of ObservedRate.</param>
/// <param name="WilsonUpper">The upper end of the Wilson score interval of ObservedRate.</param>
public sealed record ReliabilityBin(
    int Bin, double Lower, double Upper, int Count, int Events, double MeanPredicted, double ObservedRate,
    double WilsonLower, double WilsonUpper);

/// <summary>One risk group of the Hosmer–Lemeshow test.</summary>
/// <param name="Count">The number of cases in the group.</param>
/// <param name="Observed">The number of events (outcome 1) in the group.</param>
/// <param name="Expected">The sum of the predicted probabilities in the group.</param>
/// <param name="MinPredicted">The smallest predicted probability in the group.</param>
/// <param name="MaxPredicted">The largest predicted probability in the group.</param>
public sealed record RiskGroup(int Count, int Observed, double Expected, double MinPredicted, double MaxPredicted);

/// <summary>
/// The Hosmer–Lemeshow goodness-of-fit test, H = Σ (O_g − E_g)² / (E_g (1 − E_g/n_g)), with the degrees of freedom of
/// external validation data (df = number of groups; Hosmer, Lemeshow &amp; Sturdivant 2013). A group whose
/// E_g (1 − E_g/n_g) is 0 (all its p are 0, or all are 1) makes the statistic +∞ (P = 0), or NaN when O_g = E_g too.
/// </summary>
/// <param name="Statistic">H.</param>
/// <param name="Df">The degrees of freedom: the number of (non-empty) groups.</param>
/// <param name="P">The upper tail of χ²(Df) at H.</param>
/// <param name="Groups">The groups, in ascending order of risk.</param>
public sealed record HosmerLemeshowTest(double Statistic, int Df, double P, IReadOnlyList<RiskGroup> Groups);

/// <summary>
/// Murphy's (1973) decomposition of the Brier score over equal-width bins b = min(⌊k·p⌋, k − 1) (closed on the left):
/// Brier = Reliability − Resolution + Uncertainty + WithinBin. With no cases every term is NaN.
/// </summary>
/// <param name="Reliability">(1/n) Σ n_b (p̄_b − ō_b)².</param>
/// <param name="Resolution">(1/n) Σ n_b (ō_b − ō)².</param>
/// <param name="Uncertainty">ō (1 − ō).</param>
/// <param name="WithinBin">The remainder Brier − (Reliability − Resolution + Uncertainty), from the spread of p within bins.</param>
public sealed record MurphyDecomposition(double Reliability, double Resolution, double Uncertainty, double WithinBin);

/// <summary>
/// Spiegelhalter's (1986) z test of calibration: z = Σ (y − p)(1 − 2p) / √Σ (1 − 2p)² p (1 − p), and its two-sided
/// normal p-value.
/// </summary>
/// <param name="Z">The z statistic.</param>
/// <param name="P">The two-sided p-value, erfc(|z|/√2).</param>
public sealed record SpiegelhalterTest(double Z, double P);

/// <summary>
/// The area under the ROC curve with its DeLong (1988) standard error and interval Estimate ± z·Se clamped to [0, 1].
/// Se, Lower and Upper are NaN when there are fewer than two events or fewer than two non-events (a sample variance
/// of the placements needs two values); every field is NaN when there are no events or no non-events.
/// </summary>
/// <param name="Estimate">The AUC (Mann–Whitney, ties counted one half).</param>
/// <param name="Se">The DeLong standard error.</param>
/// <param name="Lower">max(0, Estimate − z·Se).</param>
/// <param name="Upper">min(1, Estimate + z·Se).</param>
public sealed record AucEstimate(double Estimate, double Se, double Lower, double Upper);

/// <summary>
/// The paired DeLong comparison of two scores' AUCs on the same cases. Difference = AucA − AucB; Se from the 2×2 DeLong
/// covariance; Z = Difference/Se and P = erfc(|Z|/√2); interval Difference ∓ z·Se (not clamped). When Se is 0 (for
/// example, two scores that rank the cases identically), Z is 0 and P is 1 if Difference is 0, and Z is ±∞ and P is 0
/// otherwise. When Se is NaN (fewer than two events or non-events), Z, P and the interval are NaN.
/// </summary>
/// <param name="AucA">The AUC of score a.</param>
/// <param name="AucB">The AUC of score b.</param>
/// <param name="Difference">AucA − AucB.</param>
/// <param name="Se">The standard error of the difference.</param>
/// <param name="Z">Difference / Se.</param>
/// <param name="P">The two-sided normal p-value.</param>
/// <param name="Lower">Difference − z·Se.</param>
/// <param name="Upper">Difference + z·Se.</param>
public sealed record PairedAucComparison(
    double AucA, double AucB, double Difference, double Se, double Z, double P, double Lower, double Upper);

/// <summary>
/// The paired comparison of two forecasts' mean losses on the same cases: d_i = loss_a,i − loss_b,i, Difference =
/// mean d, Se = s_d/√n, Z = Difference/Se, two-sided normal P, interval Difference ∓ z·Se. The cases are treated as
/// independent (the Diebold–Mariano statistic without a HAC variance). With n = 0 every value is NaN; with n = 1, Se, Z,
/// P and the interval are NaN. When Se is 0, Z is 0 and P is 1 if Difference is 0, and Z is ±∞ and P is 0 otherwise.
/// </summary>
/// <param name="Count">The number of cases n.</param>
/// <param name="MeanA">The mean loss of forecast a.</param>
/// <param name="MeanB">The mean loss of forecast b.</param>
/// <param name="Difference">The mean of d_i (≈ MeanA − MeanB).</param>
/// <param name="Se">The sample standard deviation of d_i divided by √n.</param>
/// <param name="Lower">Difference − z·Se.</param>
/// <param name="Upper">Difference + z·Se.</param>
/// <param name="Z">Difference / Se.</param>
/// <param name="P">The two-sided normal p-value erfc(|Z|/√2).</param>
public sealed record PairedLossComparison(
    int Count, double MeanA, double MeanB, double Difference, double Se, double Lower, double Upper, double Z, double P);

/// <summary>
/// The calibration and discrimination statistics of a batch of labelled predictions; see
/// <see cref="CalibrationStatistics.Compute"/>.
/// </summary>
/// <param name="Labelled">The number of labelled cases n.</param>
/// <param name="Events">The number of events O = Σ y.</param>
/// <param name="Expected">The expected number of events E = Σ p.</param>
/// <param name="ObservedExpected">
/// O/E with the interval exp(ln(O/E) ∓ z/√O) (Poisson approximation for O). Null when E = 0 (the ratio is undefined)
/// or O = 0 (the ratio is 0 and the log-scale interval has infinite width).
/// </param>
/// <param name="CalibrationIntercept">
/// Calibration-in-the-large: a in logit P(y = 1) = a + logit(p) (a logistic fit with offset logit(p)). Null when it is
/// not estimable: no events, no non-events, or the Newton iteration did not converge.
/// </param>
/// <param name="CalibrationSlope">
/// b in logit P(y = 1) = c + b·logit(p). Null when not estimable: no events, no non-events, all logit(p) equal,
/// separation, or non-convergence.
/// </param>
/// <param name="CalibrationSlopeIntercept">The intercept c of the slope fit (null exactly when the slope is).</param>
/// <param name="Spiegelhalter">Spiegelhalter's z test; null when its denominator is 0 (every p is 0, ½ or 1).</param>
/// <param name="HosmerLemeshow">The Hosmer–Lemeshow test; null when the risk quantiles give fewer than two groups.</param>
/// <param name="Brier">The Brier score mean (p − y)²; NaN when n = 0.</param>
/// <param name="Murphy">Murphy's decomposition of the Brier score; all terms NaN when n = 0.</param>
/// <param name="LogLoss">−mean(y ln p + (1 − y) ln(1 − p)) with p clipped to [1e-15, 1 − 1e-15]; NaN when n = 0.</param>
/// <param name="Ece">The expected calibration error Σ_b (n_b/n) |ō_b − p̄_b| over the reliability bins; NaN when n = 0.</param>
/// <param name="Reliability">The non-empty bins of the reliability table.</param>
/// <param name="Auc">The AUC with its DeLong interval; null when there are no events or no non-events.</param>
public sealed record CalibrationReport(
    int Labelled, int Events, double Expected,
    Interval? ObservedExpected,
    FittedValue? CalibrationIntercept,
    FittedValue? CalibrationSlope,
    double? CalibrationSlopeIntercept,
    SpiegelhalterTest? Spiegelhalter,
    HosmerLemeshowTest? HosmerLemeshow,
    double Brier, MurphyDecomposition Murphy, double LogLoss, double Ece,
    IReadOnlyList<ReliabilityBin> Reliability,
    AucEstimate? Auc);
