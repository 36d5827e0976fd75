# Reference values for the fitter, from R's glm() (Debian r-base-core, r-cran-mass).
#
# Writes each open dataset as the CSV that `scorer fit` reads, fits the same design with
# glm(..., family = binomial(link)) to epsilon = 1e-14 and then restarted from its estimate until the coefficients
# stop moving (see tight_glm), for the logit, probit and cloglog links, and writes the coefficients and their
# standard errors under the term names Scorer gives them, with the deviance, null deviance and AIC. Also two failures R flags: complete separation (birthwt's `low` is defined as
# bwt < 2500 g, so low ~ bwt separates) and an aliased term (infert's total = spontaneous + induced).
#
# Usage: Rscript fitting-reference.R OUTPUT_DIR
suppressPackageStartupMessages(library(MASS))

args <- commandArgs(trailingOnly = TRUE)
out <- if (length(args) >= 1) args[1] else "out"
dir.create(out, showWarnings = FALSE, recursive = TRUE)
num <- function(x) sprintf("%.17g", x)

write_fit <- function(name, fit, scorer_terms) {
  if (!fit$converged) stop(name, ": glm did not converge")
  s <- summary(fit)$coefficients
  if (!identical(rownames(s), names(scorer_terms))) stop(name, ": term order ", paste(rownames(s), collapse = ", "))
  write.csv(data.frame(term = unname(unlist(scorer_terms)), estimate = num(s[, 1]), se = num(s[, 2])),
            file.path(out, paste0("fit-", name, ".coefficients.csv")), row.names = FALSE, quote = TRUE)
  write.csv(data.frame(deviance = num(deviance(fit)), null_deviance = num(fit$null.deviance), aic = num(AIC(fit)),
                       df_residual = fit$df.residual),
            file.path(out, paste0("fit-", name, ".stats.csv")), row.names = FALSE, quote = FALSE)
  cat(sprintf("%-22s deviance %.6f  aic %.6f\n", name, deviance(fit), AIC(fit)))
}

control <- glm.control(epsilon = 1e-14, maxit = 200)

# glm's convergence test is on the deviance; with Fisher scoring (probit, cloglog) the coefficients converge only
# linearly, so at epsilon = 1e-14 they can still be ~1e-7 from the optimum. Restart from the estimate until no
# coefficient moves by more than 1e-13 relative.
tight_glm <- function(formula, data, link) {
  fit <- glm(formula, data = data, family = binomial(link), control = control)
  for (round in 1:200) {
    b <- coef(fit)
    fit <- glm(formula, data = data, family = binomial(link), start = b, control = glm.control(epsilon = 1e-16, maxit = 1000))
    if (max(abs(coef(fit) - b) / pmax(abs(b), 1e-3)) < 1e-13) break
  }
  fit
}

# --- infert (R datasets): categorical education; log1p; every numeric factor centred at its training mean. ---
inf <- infert[, c("case", "education", "age", "parity", "spontaneous", "induced")]
inf$education <- as.character(inf$education)
inf$total <- inf$spontaneous + inf$induced
inf$w <- (infert$stratum %% 3) + 1   # integer prior weights, for the weighted fit below
inf$off <- 0.05 * infert$age         # an offset, for the same
write.csv(inf, file.path(out, "infert.train.csv"), row.names = FALSE, quote = TRUE)
inf$education <- factor(inf$education, levels = sort(unique(inf$education), method = "radix"))  # ordinal order, as Scorer sorts
infert_terms <- list("(Intercept)" = "(intercept)", "I(age - mean(age))" = "age", "I(parity - mean(parity))" = "parity",
  "I(log1p(spontaneous) - mean(log1p(spontaneous)))" = "log1p(spontaneous)", "I(induced - mean(induced))" = "induced",
  "education12+ yrs" = "education=12+ yrs", "education6-11yrs" = "education=6-11yrs")
for (link in c("logit", "probit", "cloglog")) {
  fit <- tight_glm(case ~ I(age - mean(age)) + I(parity - mean(parity)) + I(log1p(spontaneous) - mean(log1p(spontaneous))) +
                     I(induced - mean(induced)) + education, inf, link)
  write_fit(paste0("infert-", link), fit, infert_terms)
}

# Prior weights and an offset (logit).
fit <- glm(case ~ parity + education, data = inf, family = binomial, weights = w, offset = off,
           control = glm.control(epsilon = 1e-16, maxit = 1000))
write_fit("infert-weighted", fit, list("(Intercept)" = "(intercept)", "parity" = "parity",
  "education12+ yrs" = "education=12+ yrs", "education6-11yrs" = "education=6-11yrs"))

# --- birthwt (MASS): categorical race with reference white, log(lwt), and the interaction log(lwt):race. ---
bw <- birthwt[, c("low", "age", "lwt", "race", "smoke", "ht", "ui", "ptl", "bwt")]
bw$race <- c("white", "black", "other")[bw$race]
write.csv(bw, file.path(out, "birthwt.train.csv"), row.names = FALSE, quote = TRUE)
bw$race <- factor(bw$race, levels = c("white", "black", "other"))
birthwt_terms <- list("(Intercept)" = "(intercept)", "age" = "age", "log(lwt)" = "log(lwt)", "smoke" = "smoke", "ht" = "ht",
  "ui" = "ui", "ptl" = "ptl", "raceblack" = "race=black", "raceother" = "race=other",
  "log(lwt):raceblack" = "log(lwt):race=black", "log(lwt):raceother" = "log(lwt):race=other")
for (link in c("logit", "probit", "cloglog")) {
  fit <- tight_glm(low ~ age + log(lwt) + smoke + ht + ui + ptl + race + log(lwt):race, bw, link)
  write_fit(paste0("birthwt-", link), fit, birthwt_terms)
}

# --- What R flags. ---
warnings_of <- function(expr) {
  seen <- character(0)
  withCallingHandlers(expr, warning = function(w) { seen <<- c(seen, conditionMessage(w)); invokeRestart("muffleWarning") })
  seen
}
sep <- warnings_of(glm(low ~ bwt, data = bw, family = binomial))
writeLines(sep, file.path(out, "separation.warnings.txt"))
alias_fit <- glm(case ~ spontaneous + induced + total, data = inf, family = binomial)
write.csv(data.frame(term = names(coef(alias_fit)), aliased = is.na(coef(alias_fit))),
          file.path(out, "aliased.csv"), row.names = FALSE, quote = TRUE)
cat("separation warnings:", paste(sep, collapse = " | "), "\n")
cat("aliased:", paste(names(coef(alias_fit))[is.na(coef(alias_fit))], collapse = ", "), "\n")
