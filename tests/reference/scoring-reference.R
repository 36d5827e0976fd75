# Reference values for the scoring engine, from R's glm() and predict.glm() (Debian r-base-core, r-cran-mass).
#
# For each open dataset and each link (logit, probit, cloglog) this script
#   1. fits the model with glm(..., family = binomial(link)) to a tight tolerance,
#   2. writes the fit as a Scorer model file (coefficients and vcov() in full precision) - R acting as the outside tool
#      that writes the documented format,
#   3. writes the rows to score (the training rows plus rows outside the training range) as CSV, and
#   4. writes predict(fit, newdata, type = "link", se.fit = TRUE) with the probability and the Wald band mapped through
#      the inverse link, at levels 0.95 and 0.90.
# Inverse links are evaluated directly (plogis, pnorm, -expm1(-exp(eta))) rather than with binomial()$linkinv, which
# clamps probabilities near 0 and 1 for the sake of fitting.
#
# Usage: Rscript scoring-reference.R OUTPUT_DIR
suppressPackageStartupMessages(library(MASS))

args <- commandArgs(trailingOnly = TRUE)
out <- if (length(args) >= 1) args[1] else "out"
dir.create(out, showWarnings = FALSE, recursive = TRUE)

num <- function(x) sprintf("%.17g", x)
str <- function(x) paste0('"', gsub('"', '\\\\"', x), '"')
arr <- function(xs) paste0("[", paste(xs, collapse = ", "), "]")

inverse_link <- function(link, eta) switch(link,
  logit = plogis(eta),
  probit = pnorm(eta),
  cloglog = -expm1(-exp(eta)))

# A feature: list(name, type, min, max) or list(name, type, levels, reference).
feature_json <- function(f) {
  if (f$type == "numeric") {
    sprintf('{"name": %s, "type": "numeric", "min": %s, "max": %s, "missing": "reject"}', str(f$name), num(f$min), num(f$max))
  } else {
    sprintf('{"name": %s, "type": "categorical", "levels": %s, "reference": %s, "missing": "reject", "unknown": "reject"}',
      str(f$name), arr(sapply(f$levels, str)), str(f$reference))
  }
}

# A factor: list(feature, transform, center, scale) or list(feature, level).
factor_json <- function(g) {
  if (!is.null(g$level)) {
    sprintf('{"feature": %s, "level": %s}', str(g$feature), str(g$level))
  } else {
    parts <- c(sprintf('"feature": %s', str(g$feature)))
    if (!is.null(g$transform)) parts <- c(parts, sprintf('"transform": %s', str(g$transform)))
    if (!is.null(g$center)) parts <- c(parts, sprintf('"center": %s', num(g$center)))
    if (!is.null(g$scale)) parts <- c(parts, sprintf('"scale": %s', num(g$scale)))
    paste0("{", paste(parts, collapse = ", "), "}")
  }
}

write_case <- function(name, formula, data, link, features, terms, newdata, outcome) {
  fit <- glm(formula, data = data, family = binomial(link = link),
             control = glm.control(epsilon = 1e-14, maxit = 200))
  if (!fit$converged) stop(name, ": glm did not converge")
  b <- coef(fit)
  if (any(is.na(b))) stop(name, ": aliased coefficients")
  if (!identical(names(b), names(terms))) {
    stop(name, ": term order differs from R's: ", paste(names(b), collapse = ", "))
  }
  v <- vcov(fit)

  term_lines <- mapply(function(tn, factors, coefficient) {
    sprintf('    {"name": %s, "coefficient": %s, "factors": %s}', str(tn), num(coefficient), arr(sapply(factors, factor_json)))
  }, names(terms), terms, b)
  cov_lines <- apply(v, 1, function(r) paste0("    ", arr(num(r))))
  # The baseline gives the training mean of each term's value (the model matrix's column means), so that the engine
  # reports contributions from a typical row, as predict(type = "terms") does.
  mm <- model.matrix(fit)
  means <- colMeans(mm)
  varying <- names(b) != "(Intercept)"
  baseline <- sprintf('{"n": %d, "events": %d, "term_means": {%s}}', nrow(mm), as.integer(sum(fit$y)),
    paste(sprintf("%s: %s", sapply(names(terms)[varying], str), num(means[varying])), collapse = ", "))
  json <- paste0('{\n',
    '  "format": "scorer.model/1",\n',
    '  "model": ', str(name), ',\n',
    '  "version": "r-', link, '",\n',
    '  "description": ', str(paste0("glm(", deparse1(formula), ", binomial(", link, ")) in R ", getRversion())), ',\n',
    '  "link": ', str(link), ',\n',
    '  "outcome": ', outcome, ',\n',
    '  "features": [\n    ', paste(sapply(features, feature_json), collapse = ",\n    "), '\n  ],\n',
    '  "terms": [\n', paste(term_lines, collapse = ",\n"), '\n  ],\n',
    '  "covariance": [\n', paste(cov_lines, collapse = ",\n"), '\n  ],\n',
    '  "baseline": ', baseline, '\n',
    '}\n')
  stem <- file.path(out, paste0(name, "-", link))
  writeLines(json, paste0(stem, ".model.json"), sep = "")

  p <- predict(fit, newdata = newdata, type = "link", se.fit = TRUE)
  eta <- unname(p$fit); se <- unname(p$se.fit)
  z95 <- qnorm(0.975); z90 <- qnorm(0.95)
  expected <- data.frame(
    eta = num(eta), se = num(se), probability = num(inverse_link(link, eta)),
    lower95 = num(inverse_link(link, eta - z95 * se)), upper95 = num(inverse_link(link, eta + z95 * se)),
    lower90 = num(inverse_link(link, eta - z90 * se)), upper90 = num(inverse_link(link, eta + z90 * se)))
  write.csv(expected, paste0(stem, ".expected.csv"), row.names = FALSE, quote = FALSE)

  # predict(type = "terms"): each model term's part of eta, centred at the training means of its columns. A term of
  # R (a factor, say) can span several coefficients: terms-assign.csv gives each coefficient's term (0: the intercept).
  pt <- predict(fit, newdata = newdata, type = "terms")
  terms_out <- as.data.frame(lapply(seq_len(ncol(pt)), function(j) num(unname(pt[, j]))))
  names(terms_out) <- paste0("term", seq_len(ncol(pt)))
  write.csv(terms_out, paste0(stem, ".terms.csv"), row.names = FALSE, quote = FALSE)
  write.csv(data.frame(coefficient = seq_along(b), term = attr(mm, "assign")), paste0(stem, ".terms-assign.csv"),
    row.names = FALSE, quote = FALSE)
  cat(sprintf("%-28s n=%d terms=%d deviance=%.6f\n", basename(stem), nrow(data), length(b), deviance(fit)))
}

write_rows <- function(name, rows) {
  write.csv(rows, file.path(out, paste0(name, ".rows.csv")), row.names = FALSE, quote = TRUE, na = "")
}

# --- infert (R datasets): case-control study of infertility after abortion. Categorical predictor: education. ---
inf <- infert
inf$education <- factor(as.character(inf$education), levels = c("0-5yrs", "6-11yrs", "12+ yrs"))
inf_new <- rbind(
  inf[, c("education", "age", "parity", "spontaneous", "induced")],
  data.frame(education = factor(c("12+ yrs", "0-5yrs", "6-11yrs"), levels = levels(inf$education)),
             age = c(19, 50, 33), parity = c(1, 8, 3), spontaneous = c(0, 2, 5), induced = c(0, 2, 4)))
inf_features <- list(
  list(name = "education", type = "categorical", levels = levels(inf$education), reference = "0-5yrs"),
  list(name = "age", type = "numeric", min = min(inf$age), max = max(inf$age)),
  list(name = "parity", type = "numeric", min = min(inf$parity), max = max(inf$parity)),
  list(name = "spontaneous", type = "numeric", min = min(inf$spontaneous), max = max(inf$spontaneous)),
  list(name = "induced", type = "numeric", min = min(inf$induced), max = max(inf$induced)))
inf_terms <- list(
  "(Intercept)" = list(),
  "education6-11yrs" = list(list(feature = "education", level = "6-11yrs")),
  "education12+ yrs" = list(list(feature = "education", level = "12+ yrs")),
  "I(age - 31)" = list(list(feature = "age", center = 31)),
  "parity" = list(list(feature = "parity")),
  "log1p(spontaneous)" = list(list(feature = "spontaneous", transform = "log1p")),
  "induced" = list(list(feature = "induced")))
inf_outcome <- '{"name": "case", "positive": "infertile (case)", "horizon": "P1D", "negatives": "explicit"}'
write_rows("infert", inf_new)
for (link in c("logit", "probit", "cloglog")) {
  write_case("infert", case ~ education + I(age - 31) + parity + log1p(spontaneous) + induced, inf, link,
             inf_features, inf_terms, inf_new, inf_outcome)
}

# --- birthwt (MASS): low birth weight. Categorical race, transforms, and a numeric x categorical interaction. ---
bw <- birthwt
bw$race <- factor(c("white", "black", "other")[bw$race], levels = c("white", "black", "other"))
bw_cols <- c("age", "lwt", "race", "smoke", "ht", "ui", "ptl")
bw_new <- rbind(
  bw[, bw_cols],
  data.frame(age = c(12, 47, 30), lwt = c(70, 280, 120), race = factor(c("black", "other", "white"), levels = levels(bw$race)),
             smoke = c(1, 0, 1), ht = c(0, 1, 0), ui = c(1, 0, 0), ptl = c(0, 4, 1)))
bw_features <- list(
  list(name = "age", type = "numeric", min = min(bw$age), max = max(bw$age)),
  list(name = "lwt", type = "numeric", min = min(bw$lwt), max = max(bw$lwt)),
  list(name = "race", type = "categorical", levels = levels(bw$race), reference = "white"),
  list(name = "smoke", type = "numeric", min = 0, max = 1),
  list(name = "ht", type = "numeric", min = 0, max = 1),
  list(name = "ui", type = "numeric", min = 0, max = 1),
  list(name = "ptl", type = "numeric", min = min(bw$ptl), max = max(bw$ptl)))
bw_terms <- list(
  "(Intercept)" = list(),
  "I((age - 23)/5)" = list(list(feature = "age", center = 23, scale = 5)),
  "log(lwt)" = list(list(feature = "lwt", transform = "log")),
  "raceblack" = list(list(feature = "race", level = "black")),
  "raceother" = list(list(feature = "race", level = "other")),
  "smoke" = list(list(feature = "smoke")),
  "ht" = list(list(feature = "ht")),
  "ui" = list(list(feature = "ui")),
  "sqrt(ptl)" = list(list(feature = "ptl", transform = "sqrt")),
  "log(lwt):raceblack" = list(list(feature = "lwt", transform = "log"), list(feature = "race", level = "black")),
  "log(lwt):raceother" = list(list(feature = "lwt", transform = "log"), list(feature = "race", level = "other")))
bw_outcome <- '{"name": "low", "positive": "birth weight below 2.5 kg", "horizon": "P1D", "negatives": "explicit"}'
write_rows("birthwt", bw_new)
for (link in c("logit", "probit", "cloglog")) {
  write_case("birthwt", low ~ I((age - 23) / 5) + log(lwt) + race + smoke + ht + ui + sqrt(ptl) + log(lwt):race, bw, link,
             bw_features, bw_terms, bw_new, bw_outcome)
}

# --- Pima (MASS): diabetes, fit on Pima.tr, scored on Pima.te (external data) with its outcomes, for the monitor's
# end-to-end check against tests/reference/calibration (the same fit as its pima-logit case). ---
pima_cols <- c("npreg", "glu", "bmi", "ped", "age")
pima_features <- lapply(pima_cols, function(col) list(name = col, type = "numeric",
  min = min(Pima.tr[[col]]), max = max(Pima.tr[[col]])))
pima_terms <- c(list("(Intercept)" = list()), setNames(lapply(pima_cols, function(col) list(list(feature = col))), pima_cols))
pima_outcome <- '{"name": "diabetes", "positive": "diabetic by WHO criteria", "horizon": "P1D", "negatives": "explicit"}'
write_rows("pima", Pima.te[, pima_cols])
write.csv(data.frame(y = as.integer(Pima.te$type == "Yes")), file.path(out, "pima.outcomes.csv"), row.names = FALSE, quote = FALSE)
write_case("pima", type ~ npreg + glu + bmi + ped + age, Pima.tr, "logit", pima_features, pima_terms, Pima.te[, pima_cols], pima_outcome)

# --- Quantiles (qnorm, qchisq) for the distribution checks. ---
q <- data.frame(
  kind = c(rep("normal", 6), rep("chisq", 8)),
  p = c(0.5, 0.9, 0.95, 0.975, 0.995, 0.9995, 0.95, 0.95, 0.95, 0.99, 0.99, 0.95, 0.05, 0.999),
  df = c(rep(NA, 6), 1, 2, 10, 1, 8, 30, 3, 20))
q$value <- ifelse(q$kind == "normal", qnorm(q$p), qchisq(q$p, q$df))
q$value <- num(q$value)
write.csv(q, file.path(out, "quantiles.csv"), row.names = FALSE, quote = FALSE, na = "")

# --- Inverse links and their derivatives over the whole range of eta, tails included. ---
eta <- c(-700, -300, -100, -37.5, -30, -20, -8, -3, -1, -1e-8, 0, 1e-8, 0.5, 1, 3, 8, 20, 30, 100, 700)
links <- data.frame(
  eta = num(eta),
  logit = num(plogis(eta)), logit_d = num(dlogis(eta)),
  probit = num(pnorm(eta)), probit_d = num(dnorm(eta)),
  cloglog = num(-expm1(-exp(eta))), cloglog_d = num(exp(eta - exp(eta))))
write.csv(links, file.path(out, "links.csv"), row.names = FALSE, quote = FALSE)

# --- expm1 and log1p, including arguments where the naive formulas lose every digit. ---
x <- c(-0.9999, -0.5, -0.1, -3.3546262790251185e-4, -1e-5, -1e-10, -1e-300, 1e-300, 1e-12, 1e-7, 1e-4, 0.01, 0.3, 0.7, 2, 50)
write.csv(data.frame(x = num(x), expm1 = num(expm1(x)), log1p = num(log1p(x))),
          file.path(out, "elementary.csv"), row.names = FALSE, quote = FALSE)
