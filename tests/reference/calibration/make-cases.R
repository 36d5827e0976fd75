# Reference cases for calibration / discrimination / drift monitoring, part 1 of 2 (R).
#
# Fits the models on open data shipped by Debian r-cran-mass, writes each case's rows (p, y, eta) in prediction-time
# order to OUT/<case>.csv, and writes the statistics that come from R - glm() calibration intercept and slope, pROC's
# DeLong variance and interval, the Hosmer-Lemeshow grouping made with quantile()/cut(), and the PSI baseline edges
# made with quantile() - to the side file OUT/r/<case>.json. statistics.py reads both and writes OUT/<case>.json.
#
# Debian packages: r-base-core (stats: glm, quantile, cut, pchisq, qnorm), r-cran-mass (Pima.tr, Pima.te, birthwt),
# r-cran-proc (roc, var, ci.auc).
#
# Usage: Rscript make-cases.R OUTPUT_DIR
suppressPackageStartupMessages({
  library(MASS)
  library(pROC)
})

args <- commandArgs(trailingOnly = TRUE)
out <- if (length(args) >= 1) args[1] else "out"
dir.create(file.path(out, "r"), showWarnings = FALSE, recursive = TRUE)

num <- function(x) {
  x <- as.double(x)
  if (any(!is.finite(x))) stop("non-finite value in output: ", paste(x, collapse = ", "))
  sprintf("%.17g", x)
}

# Minimal JSON writer: named list -> object, unnamed list -> array, numeric scalar -> number (full precision),
# numeric vector wrapped in I() -> array, character scalar -> string.
to_json <- function(x, indent = "") {
  inner <- paste0(indent, "  ")
  if (is.list(x) && !is.null(names(x))) {
    items <- mapply(function(k, v) paste0(inner, '"', k, '": ', to_json(v, inner)), names(x), x)
    paste0("{\n", paste(items, collapse = ",\n"), "\n", indent, "}")
  } else if (is.list(x)) {
    paste0("[\n", paste0(inner, sapply(x, to_json, indent = inner), collapse = ",\n"), "\n", indent, "]")
  } else if (is.character(x)) {
    stopifnot(length(x) == 1)
    paste0('"', gsub('"', '\\\\"', x), '"')
  } else if (inherits(x, "AsIs") || length(x) != 1) {
    paste0("[", paste(num(x), collapse = ", "), "]")
  } else {
    num(x)
  }
}

ctl <- glm.control(epsilon = 1e-14, maxit = 100)
z975 <- qnorm(0.975)  # stats::qnorm; 1.959963984540054

# stats::glm with binomial(logit) and tight convergence. When glm stops at maxit without meeting its deviance test
# (it happens for pima-cloglog: two rows have p within 1e-14 of 1, one of them with y = 0, and glm.fit's IRLS works with
# mu (1 - mu), which loses precision there, so the deviance and the fixed point jitter at about 1e-10), the estimate is
# accepted only if one exact Newton step from it (score X'(y - mu), information X'WX with plogis evaluated directly) is
# below 1e-8. The size of that step is recorded so that the C# tests can set their tolerance.
calibration_glm <- function(formula, data, label) {
  m <- suppressWarnings(glm(formula, family = binomial, data = data, control = ctl))
  X <- model.matrix(m)
  off <- if (is.null(m$offset)) 0 else m$offset
  mu <- plogis(drop(X %*% coef(m)) + off)
  step <- drop(solve(crossprod(X, X * (mu * (1 - mu))), crossprod(X, m$y - mu)))
  m$newton_step <- max(abs(step))
  if (!m$converged) {
    message(sprintf("note: %s: glm did not meet epsilon = 1e-14 in %d iterations; exact Newton step from its estimate = %.3g",
      label, m$iter, m$newton_step))
  }
  if (!(m$newton_step < 1e-8)) stop(label, ": glm estimate is not at the optimum (Newton step ", m$newton_step, ")")
  m
}

# ---------------------------------------------------------------------------------------------------------------------
# The cases. eta is the linear predictor on the link scale of the model that produced p.
# ---------------------------------------------------------------------------------------------------------------------
cases <- list()

# 1. pima-logit: fit on Pima.tr (200 rows), predicted on the external Pima.te (332 rows).
fit_logit <- glm(type ~ npreg + glu + bmi + ped + age, family = binomial, data = Pima.tr, control = ctl)
stopifnot(fit_logit$converged)
y_pima <- as.integer(Pima.te$type == "Yes")
p1 <- unname(predict(fit_logit, Pima.te, type = "response"))
eta1 <- unname(predict(fit_logit, Pima.te, type = "link"))
cases[["pima-logit"]] <- list(p = p1, y = y_pima, eta = eta1)

# 2. pima-miscalibrated: the same rows, predictions distorted on purpose: p' = plogis(-0.4 + 1.6 qlogis(p)).
p2 <- plogis(-0.4 + 1.6 * qlogis(p1))
cases[["pima-miscalibrated"]] <- list(p = p2, y = y_pima, eta = qlogis(p2))

# 3. pima-cloglog: the same formula with the complementary log-log link, fit on Pima.tr, predicted on Pima.te.
fit_cll <- glm(type ~ npreg + glu + bmi + ped + age, family = binomial(link = "cloglog"), data = Pima.tr,
  control = ctl)
stopifnot(fit_cll$converged)
cases[["pima-cloglog"]] <- list(
  p = unname(predict(fit_cll, Pima.te, type = "response")), y = y_pima,
  eta = unname(predict(fit_cll, Pima.te, type = "link")))

# 4. birthwt-probit: probit model evaluated on its own 189 training rows (in-sample; fine for checking formulas).
fit_probit <- glm(low ~ age + lwt + smoke + ht + ui, family = binomial(link = "probit"), data = birthwt,
  control = ctl)
stopifnot(fit_probit$converged)
cases[["birthwt-probit"]] <- list(
  p = unname(predict(fit_probit, birthwt, type = "response")), y = as.integer(birthwt$low),
  eta = unname(predict(fit_probit, birthwt, type = "link")))

# ---------------------------------------------------------------------------------------------------------------------
for (name in names(cases)) {
  cs <- cases[[name]]
  n <- length(cs$p)
  stopifnot(length(cs$y) == n, length(cs$eta) == n, all(cs$p > 0 & cs$p < 1), all(cs$y %in% c(0L, 1L)))

  # Rows in prediction-time order (the data frame's row order, index 0..n-1), 17 significant digits.
  csv <- file.path(out, paste0(name, ".csv"))
  writeLines(c("p,y,eta", sprintf("%s,%d,%s", num(cs$p), cs$y, num(cs$eta))), csv)
  # Everything below is computed from the values as read back from the CSV (they round-trip exactly at 17 digits),
  # so that R, Python and the C# tests all start from the same doubles.
  back <- read.csv(csv, colClasses = c("numeric", "integer", "numeric"))
  stopifnot(identical(back$p, cs$p), identical(back$y, cs$y), identical(back$eta, cs$eta))
  p <- back$p
  y <- back$y
  lp <- qlogis(p)  # stats::qlogis: the logit of p, the covariate / offset of the calibration models

  # Calibration intercept ("calibration-in-the-large"): stats::glm(y ~ 1 + offset(qlogis(p)), binomial).
  m_int <- calibration_glm(y ~ 1 + offset(lp), data.frame(y = y, lp = lp), paste(name, "intercept"))
  ci_int <- summary(m_int)$coefficients
  cal_intercept <- ci_int[1, "Estimate"]
  cal_intercept_se <- ci_int[1, "Std. Error"]

  # Calibration slope: stats::glm(y ~ qlogis(p), binomial); the slope and its intercept.
  m_slope <- calibration_glm(y ~ lp, data.frame(y = y, lp = lp), paste(name, "slope"))
  cs_slope <- summary(m_slope)$coefficients
  cal_slope_intercept <- cs_slope[1, "Estimate"]
  cal_slope <- cs_slope[2, "Estimate"]
  cal_slope_se <- cs_slope[2, "Std. Error"]

  # ROC AUC with the DeLong variance and interval: pROC::roc, pROC::var(method = "delong"),
  # pROC::ci.auc(method = "delong") (interval = qnorm((1 +/- 0.95)/2, auc, se), clamped to [0, 1] by pROC).
  r <- roc(y, p, direction = "<", levels = c(0, 1), quiet = TRUE)
  auc_proc <- as.numeric(auc(r))
  auc_var <- pROC::var(r, method = "delong")
  auc_ci <- as.numeric(ci.auc(r, method = "delong", conf.level = 0.95))

  # Hosmer-Lemeshow grouping, g = 10: stats::quantile (type 7, the default) at seq(0, 1, 0.1), unique() breaks,
  # base::cut(..., include.lowest = TRUE) (right-closed intervals, the first one closed on the left too).
  # Statistic: formula, Hosmer & Lemeshow (1980): sum_g (O_g - E_g)^2 / (E_g (1 - E_g / n_g)); p from stats::pchisq.
  breaks <- unique(quantile(p, probs = seq(0, 1, 0.1)))
  grp <- cut(p, breaks = breaks, include.lowest = TRUE)
  groups <- split(seq_len(n), grp, drop = TRUE)
  hl_table <- lapply(unname(groups), function(ix) list(
    n = length(ix), observed = sum(y[ix]), expected = sum(p[ix]), p_min = min(p[ix]), p_max = max(p[ix])))
  og <- sapply(hl_table, `[[`, "observed")
  eg <- sapply(hl_table, `[[`, "expected")
  ng <- sapply(hl_table, `[[`, "n")
  hl_statistic <- sum((og - eg)^2 / (eg * (1 - eg / ng)))
  hl_groups <- length(hl_table)
  hl_df <- hl_groups  # external-data convention (no parameters fit on these rows), as the brief asks, for all cases
  hl_p <- pchisq(hl_statistic, df = hl_df, lower.tail = FALSE)

  # PSI baseline edges: stats::quantile (type 7) of eta over the first floor(n/2) rows at probs 0.1, ..., 0.9, taken
  # as seq(0, 1, 0.1)[2:10] = k * 0.1 in double, the same probabilities as the HL grouping (seq(0.1, 0.9, 0.1) would
  # be 0.1 + k * 0.1, which differs in the last bit for some k).
  half <- n %/% 2
  psi_edges <- unname(quantile(cs$eta[seq_len(half)], probs = seq(0, 1, 0.1)[2:10], type = 7))

  # Independent R evaluation of Spiegelhalter's z (formula, Spiegelhalter 1986), used by statistics.py only as a
  # cross-check of its own evaluation; rms::val.prob is not used (r-cran-rms pulls in too many packages).
  spiegelhalter_z_r <- sum((y - p) * (1 - 2 * p)) / sqrt(sum((1 - 2 * p)^2 * p * (1 - p)))

  side <- list(
    case = name,
    n = n,
    events = sum(y),
    expected = sum(p),
    cal_intercept = cal_intercept,
    cal_intercept_se = cal_intercept_se,
    cal_intercept_lower = cal_intercept - z975 * cal_intercept_se,
    cal_intercept_upper = cal_intercept + z975 * cal_intercept_se,
    cal_slope_intercept = cal_slope_intercept,
    cal_slope = cal_slope,
    cal_slope_se = cal_slope_se,
    cal_slope_lower = cal_slope - z975 * cal_slope_se,
    cal_slope_upper = cal_slope + z975 * cal_slope_se,
    cal_intercept_glm_converged = if (m_int$converged) "yes" else "no",
    cal_intercept_glm_newton_step = m_int$newton_step,
    cal_slope_glm_converged = if (m_slope$converged) "yes" else "no",
    cal_slope_glm_newton_step = m_slope$newton_step,
    auc_proc = auc_proc,
    auc_se = sqrt(auc_var),
    auc_lower = auc_ci[1],
    auc_ci_center = auc_ci[2],
    auc_upper = auc_ci[3],
    hl_statistic = hl_statistic,
    hl_groups = hl_groups,
    hl_df = hl_df,
    hl_p = hl_p,
    hl_breaks = I(unname(breaks)),
    hl_table = hl_table,
    psi_half = half,
    psi_edges = I(psi_edges),
    spiegelhalter_z_r = spiegelhalter_z_r
  )
  writeLines(to_json(side), file.path(out, "r", paste0(name, ".json")))
  cat(sprintf("%-20s n=%d events=%d cal_intercept=%.6f cal_slope=%.6f auc=%.6f hl=%.4f (%d groups)\n",
    name, n, sum(y), cal_intercept, cal_slope, auc_proc, hl_statistic, hl_groups))
}
