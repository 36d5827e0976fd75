#!/usr/bin/python3
"""Reference cases for calibration / discrimination / drift monitoring, part 2 of 2 (Python).

Reads OUT/<case>.csv (p, y, eta in prediction-time order) and the R side file OUT/r/<case>.json written by
make-cases.R, computes the remaining statistics with Debian's python3-sklearn 1.2.1, python3-statsmodels 0.13.5,
python3-scipy 1.10.1 and python3-numpy, cross-checks what can be cross-checked, and writes OUT/<case>.json.

Run with Debian's interpreter: /usr/bin/python3 statistics.py OUTPUT_DIR
Every computation carries a comment naming its source: a library function, "formula, <paper>", or "common practice".
"""
import inspect
import json
import math
import os
import sys
import time

import numpy as np
import scipy
import scipy.stats
import sklearn
import sklearn.calibration
import statsmodels
import statsmodels.api as sm
from sklearn.calibration import calibration_curve
from sklearn.metrics import brier_score_loss, log_loss, roc_auc_score
from statsmodels.stats.proportion import proportion_confint

CASES = ["pima-logit", "pima-miscalibrated", "pima-cloglog", "birthwt-probit"]
Z975 = 1.959963984540054  # = qnorm(0.975), the constant the brief fixes for the O/E interval

# CUSUM settings (Steiner, Cook, Farewell & Treasure 2000).
RA_UP, RA_DOWN = 2.0, 0.5
CUSUM_H = 2.5
MARKOV_STATES = 500
SIM_RUNS = 20_000
SIM_CAP = 10_000_000
EWMA_LAMBDA = 0.01
PSI_FLOOR = 1e-4

failures = []


def check(ok, what):
    """Record a failed cross-check (run.sh then exits non-zero) and print every check's outcome."""
    print(("  ok    " if ok else "  FAIL  ") + what)
    if not ok:
        failures.append(what)


def rel(a, b):
    return abs(a - b) / max(1.0, abs(a), abs(b))


def read_case(out, name):
    with open(os.path.join(out, name + ".csv")) as f:
        header = f.readline().strip()
        assert header == "p,y,eta", header
        rows = [line.strip().split(",") for line in f if line.strip()]
    p = np.array([float(r[0]) for r in rows])  # float() of a 17-digit decimal gives back R's double exactly
    y = np.array([int(r[1]) for r in rows])
    eta = np.array([float(r[2]) for r in rows])
    with open(os.path.join(out, "r", name + ".json")) as f:
        side = json.load(f)
    return p, y, eta, side


# ---------------------------------------------------------------------------------------------------------------------
# Bins of the reliability table: the rule of sklearn 1.2.1 calibration_curve(strategy="uniform"), copied here and
# checked against it. bins = np.linspace(0, 1, 11), i.e. edges e_i = i * 0.1 computed in double (0.30000000000000004,
# 0.6000000000000001, 0.7000000000000001 are not the nearest doubles to 0.3, 0.6, 0.7); binid =
# np.searchsorted(bins[1:-1], p) with the default side="left" = the number of interior edges e_1..e_9 STRICTLY below p.
# So bins are right-closed: bin 0 = [0, e_1], bin b = (e_b, e_{b+1}], bin 9 = (e_9, 1]; p = 0.2 -> bin 1; p = 0.3
# (the double 0.29999999999999999) -> bin 2 because it is below e_3 = 0.30000000000000004.
# ---------------------------------------------------------------------------------------------------------------------
EDGES = np.linspace(0.0, 1.0, 11)


def reliability_bin(p):
    interior = [i * 0.1 for i in range(1, 10)]  # = EDGES[1:-1] exactly (numpy computes arange * step + start)
    return np.array([sum(1 for e in interior if e < v) for v in p])


def murphy_bin(p):
    # The brief's rule for the Murphy decomposition: b = min(floor(10 p), 9) (left-closed bins [b/10, (b+1)/10)).
    # It differs from the reliability rule only for p exactly on an edge; the check below reports whether any row is.
    return np.minimum(np.floor(10.0 * p).astype(int), 9)


# ---------------------------------------------------------------------------------------------------------------------
# Risk-adjusted Bernoulli CUSUM: formula, Steiner, Cook, Farewell & Treasure (2000), R0 = 1:
#   W_t = y_t ln RA - ln(1 - p_t + RA p_t),  S_t = max(0, S_{t-1} + W_t),  S_0 = 0.
# ---------------------------------------------------------------------------------------------------------------------
def cusum_weights(p, ra):
    w0 = -np.log1p((ra - 1.0) * p)  # y = 0
    w1 = math.log(ra) + w0  # y = 1
    return w0, w1


def cusum_path(p, y, ra):
    w0, w1 = cusum_weights(p, ra)
    s, path = 0.0, []
    for t in range(len(p)):
        s = max(0.0, s + (w1[t] if y[t] == 1 else w0[t]))
        path.append(s)
    return path


def markov_arl(p, p_true, h, ra=RA_UP, m=MARKOV_STATES):
    """ARL of the upward chart by the Markov-chain approximation of Brook & Evans (1972), as used by Steiner et al.
    (2000). [0, h) is cut into m intervals of width w = h/m; state j is represented by its midpoint (j + 1/2) w
    (the chart starts in state 0). From state j, with p drawn uniformly from the case's p values and y ~ Bernoulli(
    p_true), the next value is s = max(0, (j + 1/2) w + W); it goes to state floor(s / w) if that is < m, else it
    signals (absorbing, s >= h). Q[j, k] averages these transition probabilities over the p values;
    ARL = first element of (I - Q)^{-1} 1 (numpy.linalg.solve)."""
    w = h / m
    w0, w1 = cusum_weights(p, ra)
    centers = (np.arange(m) + 0.5) * w
    n = len(p)
    rows = np.repeat(np.arange(m), n)
    q = np.zeros(m * m)
    for weight, prob in ((w1, p_true), (w0, 1.0 - p_true)):
        s = np.maximum(0.0, centers[:, None] + weight[None, :]).ravel()
        k = np.floor(s / w).astype(np.int64)
        inside = k < m
        q += np.bincount(rows[inside] * m + k[inside], weights=np.tile(prob / n, m)[inside], minlength=m * m)
    q = q.reshape(m, m)
    return float(np.linalg.solve(np.eye(m) - q, np.ones(m))[0])


def simulate_arl(p, p_true, h, seed, ra=RA_UP, runs=SIM_RUNS, cap=SIM_CAP):
    """Plain Monte-Carlo ARL: each run draws (p, y) i.i.d., p uniformly from the case's p values, y ~ Bernoulli(p_true)
    (numpy.random.default_rng(seed)), runs the chart from S = 0 and stops at the first t with S_t >= h; the run length
    counts that observation. Runs still going after `cap` steps are censored at cap (counted and reported)."""
    rng = np.random.default_rng(seed)
    w0, w1 = cusum_weights(p, ra)
    n = len(p)
    s = np.zeros(runs)
    alive = np.arange(runs)
    length = np.zeros(runs, dtype=np.int64)
    t = 0
    while alive.size and t < cap:
        t += 1
        idx = rng.integers(0, n, size=alive.size)
        event = rng.random(alive.size) < p_true[idx]
        s = np.maximum(0.0, s + np.where(event, w1[idx], w0[idx]))
        done = s >= h
        if done.any():
            length[alive[done]] = t
            keep = ~done
            alive, s = alive[keep], s[keep]
    censored = alive.size
    length[alive] = cap
    return float(length.mean()), float(length.std(ddof=1) / math.sqrt(runs)), censored


def h_for_arl(p, target=1000.0):
    """Bisection on h of the Markov-chain ARL0 (in control, y ~ Bernoulli(p)) for ARL0 = target. With m fixed the
    approximation is a step function of h at a very fine scale, so the search stops when the bracket is < 1e-10."""
    lo, hi = 0.5, CUSUM_H
    assert markov_arl(p, p, lo) < target
    while markov_arl(p, p, hi) < target:
        lo, hi = hi, 2.0 * hi
    while hi - lo > 1e-10:
        mid = 0.5 * (lo + hi)
        if markov_arl(p, p, mid) < target:
            lo = mid
        else:
            hi = mid
    return 0.5 * (lo + hi)


def delong_se(y, p):
    """Independent DeLong (1988) placement-value evaluation, only to cross-check pROC."""
    cases, controls = p[y == 1], p[y == 0]
    cmp = (cases[:, None] > controls[None, :]) + 0.5 * (cases[:, None] == controls[None, :])
    v10, v01 = cmp.mean(axis=1), cmp.mean(axis=0)
    return math.sqrt(v10.var(ddof=1) / len(cases) + v01.var(ddof=1) / len(controls)), cmp.mean()


def r_quantile7(x, probs):
    """R's quantile(type = 7) as in stats:::quantile.default: index = 1 + (n - 1) probs, lo = floor, hi = ceiling,
    q = (1 - h) x[lo] + h x[hi] with h = index - lo (1-based), and q = x[lo] where h = 0 or x[hi] == x[lo]."""
    xs = np.sort(x)
    out = []
    for pr in probs:
        index = 1 + (len(xs) - 1) * pr
        lo, hi = math.floor(index), math.ceil(index)
        q = xs[lo - 1]
        h = index - lo
        if index > lo and xs[hi - 1] != q:
            q = (1 - h) * q + h * xs[hi - 1]
        out.append(float(q))
    return out


def statistics(name, seed_base):
    p, y, eta, side = read_case(OUT, name)
    n = len(p)
    print(f"{name}: n = {n}")
    res = {"case": name}

    # --- counts -------------------------------------------------------------------------------------------------------
    res["n"] = n
    res["events"] = int(y.sum())  # sum of y
    res["expected"] = float(np.sum(p))  # sum of p (numpy pairwise summation)
    check(res["events"] == side["events"] and rel(res["expected"], side["expected"]) < 1e-14, "n/events/expected vs R")

    # --- O/E with the Poisson-approximation interval: formula, exp(ln(O/E) +/- z_0.975 / sqrt(O)) ----------------------
    o, e = res["events"], res["expected"]
    res["oe"] = o / e
    res["oe_lower"] = math.exp(math.log(o / e) - Z975 / math.sqrt(o))
    res["oe_upper"] = math.exp(math.log(o / e) + Z975 / math.sqrt(o))

    # --- calibration intercept and slope: R stats::glm (make-cases.R), 95% Wald intervals -------------------------------
    for k in ["cal_intercept", "cal_intercept_se", "cal_intercept_lower", "cal_intercept_upper",
              "cal_slope_intercept", "cal_slope", "cal_slope_se", "cal_slope_lower", "cal_slope_upper"]:
        res[k] = side[k]
    # Cross-check: statsmodels GLM(Binomial) by Newton's method (exact score), intercept-only with offset qlogis(p),
    # and y ~ qlogis(p).
    lp = scipy.special.logit(p)
    g_int = sm.GLM(y, np.ones((n, 1)), family=sm.families.Binomial(), offset=lp).fit(
        method="newton", tol=1e-14, maxiter=200, disp=0)
    g_sl = sm.GLM(y, sm.add_constant(lp), family=sm.families.Binomial()).fit(
        method="newton", tol=1e-14, maxiter=200, disp=0)
    tol = 1e-8  # R's glm.fit stops ~5e-10 from the optimum for pima-cloglog (see make-cases.R); 1e-12 elsewhere
    d = max(rel(g_int.params[0], res["cal_intercept"]), rel(g_int.bse[0], res["cal_intercept_se"]),
            rel(g_sl.params[0], res["cal_slope_intercept"]), rel(g_sl.params[1], res["cal_slope"]),
            rel(g_sl.bse[1], res["cal_slope_se"]))
    check(d < tol, f"calibration glm vs statsmodels GLM newton: max rel diff {d:.2e}")
    res["cal_glm_max_newton_step"] = max(side["cal_intercept_glm_newton_step"], side["cal_slope_glm_newton_step"])

    # --- Spiegelhalter's z: formula, Spiegelhalter (1986); two-sided p = 2 Phi(-|z|) with scipy.stats.norm.cdf --------
    num = np.sum((y - p) * (1 - 2 * p))
    den = math.sqrt(np.sum((1 - 2 * p) ** 2 * p * (1 - p)))
    res["spiegelhalter_z"] = float(num / den)
    res["spiegelhalter_p"] = float(2 * scipy.stats.norm.cdf(-abs(res["spiegelhalter_z"])))
    check(rel(res["spiegelhalter_z"], side["spiegelhalter_z_r"]) < 1e-12, "Spiegelhalter z vs R evaluation")

    # --- Hosmer-Lemeshow, g = 10: grouping by R quantile()/cut(), statistic formula (Hosmer & Lemeshow 1980), p from
    # R stats::pchisq (make-cases.R); here re-done with numpy and scipy.stats.chi2.sf as a cross-check.
    for k in ["hl_statistic", "hl_groups", "hl_df", "hl_p", "hl_table"]:
        res[k] = side[k]
    breaks = sorted(set(r_quantile7(p, [0.1 * i for i in range(11)])))  # R's seq(0, 1, 0.1) is 0 + (0:10) * 0.1
    np_breaks = np.percentile(p, [10 * i for i in range(11)])  # numpy "linear" = type 7
    check(max(abs(a - b) for a, b in zip(breaks, side["hl_breaks"])) == 0.0 and len(breaks) == len(side["hl_breaks"]),
          "HL breaks: own R-type-7 quantile == R quantile() exactly")
    check(max(abs(a - b) for a, b in zip(np.unique(np_breaks), side["hl_breaks"])) < 1e-15,
          "HL breaks: numpy percentile(linear) vs R quantile() within 1e-15")
    # cut(..., include.lowest = TRUE): group g = (b_g, b_{g+1}], the first one [b_0, b_1].
    gid = np.clip(np.searchsorted(np.array(side["hl_breaks"]), p, side="left") - 1, 0, None)
    table = [(int((gid == g).sum()), int(y[gid == g].sum()), float(p[gid == g].sum())) for g in np.unique(gid)]
    h_py = sum((og - eg) ** 2 / (eg * (1 - eg / ng)) for ng, og, eg in table)
    check(len(table) == res["hl_groups"] and rel(h_py, res["hl_statistic"]) < 1e-12 and
          all(t[0] == r["n"] and t[1] == r["observed"] for t, r in zip(table, res["hl_table"])),
          f"HL groups/statistic re-done in numpy (H = {h_py:.12g})")
    check(rel(scipy.stats.chi2.sf(res["hl_statistic"], res["hl_df"]), res["hl_p"]) < 1e-12, "HL p vs scipy chi2.sf")

    # --- Brier score: sklearn.metrics.brier_score_loss ------------------------------------------------------------------
    res["brier"] = float(brier_score_loss(y, p))
    # Murphy (1973) decomposition over 10 equal-width bins, b = min(floor(10 p), 9): formula.
    mb = murphy_bin(p)
    obar = y.mean()
    rel_sum = res_sum = 0.0
    for b in range(10):
        sel = mb == b
        nk = int(sel.sum())
        if nk:
            rel_sum += nk * (p[sel].mean() - y[sel].mean()) ** 2
            res_sum += nk * (y[sel].mean() - obar) ** 2
    res["murphy_reliability"] = rel_sum / n
    res["murphy_resolution"] = res_sum / n
    res["murphy_uncertainty"] = float(obar * (1 - obar))
    res["murphy_within"] = res["brier"] - (res["murphy_reliability"] - res["murphy_resolution"]
                                           + res["murphy_uncertainty"])
    check(rel(res["brier"], float(np.mean((p - y) ** 2))) < 1e-14, "Brier vs mean((p - y)^2)")
    rb = reliability_bin(p)
    check(True, f"rows whose Murphy bin (floor rule) differs from the reliability bin (sklearn rule): "
                f"{int((mb != rb).sum())}")
    if (mb != rb).any():
        failures.append(f"{name}: Murphy and reliability bin rules disagree on some rows")

    # --- log loss: sklearn.metrics.log_loss(labels=[0, 1]) (clips p to [eps, 1 - eps], eps = 2.22e-16) ----------------
    res["log_loss"] = float(log_loss(y, p, labels=[0, 1]))
    direct = -float(np.mean(y * np.log(p) + (1 - y) * np.log1p(-p)))
    check(rel(res["log_loss"], direct) < 1e-12, f"log loss vs direct -mean(y ln p + (1-y) ln(1-p)) ({direct:.17g})")

    # --- reliability table: sklearn.calibration.calibration_curve(n_bins=10, strategy="uniform"); Wilson 95% interval
    # from statsmodels.stats.proportion.proportion_confint(method="wilson").
    prob_true, prob_pred = calibration_curve(y, p, n_bins=10, strategy="uniform")
    rows = []
    for b in range(10):
        sel = rb == b
        cnt = int(sel.sum())
        if cnt == 0:
            continue
        pos = int(y[sel].sum())
        sum_p = 0.0
        for v in p[sel]:  # sequential sum in row order, as np.bincount(weights=...) does
            sum_p += v
        lo, hi = proportion_confint(pos, cnt, alpha=0.05, method="wilson")
        rows.append({"bin": b, "lower_edge": float(EDGES[b]), "upper_edge": float(EDGES[b + 1]), "count": cnt,
                     "mean_predicted": sum_p / cnt, "observed_rate": pos / cnt,
                     "wilson_lower": float(lo), "wilson_upper": float(hi)})
    res["reliability"] = rows
    check(len(rows) == len(prob_true) and
          all(r["observed_rate"] == a and r["mean_predicted"] == b for r, a, b in zip(rows, prob_true, prob_pred)),
          "own bin assignment reproduces calibration_curve prob_true/prob_pred exactly")
    # ECE: formula, Naeini, Cooper & Hauskrecht (2015): sum_b (n_b / n) |o_b - p_b| over the same non-empty bins.
    res["ece"] = sum(r["count"] / n * abs(r["observed_rate"] - r["mean_predicted"]) for r in rows)

    # --- ROC AUC: sklearn.metrics.roc_auc_score; DeLong SE and 95% interval: R pROC var()/ci.auc() (make-cases.R) ------
    res["auc"] = float(roc_auc_score(y, p))
    res["auc_se"] = side["auc_se"]
    res["auc_lower"] = side["auc_lower"]
    res["auc_upper"] = side["auc_upper"]
    check(rel(res["auc"], side["auc_proc"]) < 1e-14, f"sklearn AUC vs pROC auc (diff {res['auc'] - side['auc_proc']:.2e})")
    se_py, auc_py = delong_se(y, p)
    check(rel(se_py, res["auc_se"]) < 1e-10 and rel(auc_py, res["auc"]) < 1e-14, "pROC DeLong SE vs own placements")
    check(abs(res["auc_lower"] - max(0.0, side["auc_ci_center"] - Z975 * res["auc_se"])) < 1e-14 and
          abs(res["auc_upper"] - min(1.0, side["auc_ci_center"] + Z975 * res["auc_se"])) < 1e-14,
          "pROC ci.auc = auc +/- qnorm(0.975) se")

    # --- PSI of eta: common practice (formula). Baseline = rows 0..floor(n/2)-1, edges = R quantile(type 7) at
    # 0.1..0.9 (make-cases.R); expected proportion 0.1 per bin; actual = proportions of rows floor(n/2)..n-1 in
    # (-inf, e1], (e1, e2], ..., (e9, inf); both floored at 1e-4 before PSI = sum (a - e) ln(a / e).
    half = side["psi_half"]
    edges = side["psi_edges"]
    check(max(abs(a - b) for a, b in zip(r_quantile7(eta[:half], [0.1 * i for i in range(1, 10)]), edges)) == 0.0,
          "PSI edges: own R-type-7 quantile == R quantile() exactly")
    second = eta[half:]
    counts = np.bincount(np.searchsorted(np.array(edges), second, side="left"), minlength=10)
    actual = counts / len(second)
    res["psi_edges"] = edges
    res["psi_actual"] = [float(a) for a in actual]
    a_f = np.maximum(actual, PSI_FLOOR)
    e_f = np.maximum(np.full(10, 0.1), PSI_FLOOR)
    res["psi"] = float(np.sum((a_f - e_f) * np.log(a_f / e_f)))
    res["psi_baseline_rows"] = half
    res["psi_empty_bins"] = int((counts == 0).sum())

    # --- CUSUM paths (formula, Steiner et al. 2000), no reset ------------------------------------------------------------
    res["cusum_up"] = cusum_path(p, y, RA_UP)
    res["cusum_down"] = cusum_path(p, y, RA_DOWN)

    # --- CUSUM run lengths: Markov chain (Brook & Evans 1972; method of Steiner et al. 2000) and simulation -------------
    t0 = time.time()
    p1 = 2 * p / (1 + p)  # odds doubled: RA p / (1 - p + RA p) with RA = 2
    res["cusum_h"] = CUSUM_H
    res["arl0_markov"] = markov_arl(p, p, CUSUM_H)
    res["arl1_markov"] = markov_arl(p, p1, CUSUM_H)
    t1 = time.time()
    res["arl0_sim"], res["arl0_sim_se"], c0 = simulate_arl(p, p, CUSUM_H, seed=seed_base)
    res["arl1_sim"], res["arl1_sim_se"], c1 = simulate_arl(p, p1, CUSUM_H, seed=seed_base + 1)
    t2 = time.time()
    check(c0 == 0 and c1 == 0, "no censored simulation runs")
    res["sim_seeds"] = [seed_base, seed_base + 1]
    res["sim_runs"] = SIM_RUNS
    h1000 = h_for_arl(p, 1000.0)
    res["h_for_arl0_1000"] = h1000
    res["arl0_at_h_for_arl0_1000"] = markov_arl(p, p, h1000)
    res["arl1_at_h_for_arl0_1000"] = markov_arl(p, p1, h1000)
    t3 = time.time()
    z0 = (res["arl0_markov"] - res["arl0_sim"]) / res["arl0_sim_se"]
    z1 = (res["arl1_markov"] - res["arl1_sim"]) / res["arl1_sim_se"]
    check(abs(z0) < 4 and abs(z1) < 4,
          f"Markov vs simulation: ARL0 {res['arl0_markov']:.2f} vs {res['arl0_sim']:.2f} +/- {res['arl0_sim_se']:.2f} "
          f"(z = {z0:.2f}); ARL1 {res['arl1_markov']:.3f} vs {res['arl1_sim']:.3f} +/- {res['arl1_sim_se']:.3f} "
          f"(z = {z1:.2f})")
    # The M = 500 midpoint chain is a step function of h with steps of up to ~1 ARL near 1000 (and not even
    # monotone at that scale: Webster & Pettitt 2007 describe the erratic behaviour of the rounding method), so the
    # bisection lands on a jump; ARL0 there is within ~0.1% of 1000.
    check(abs(res["arl0_at_h_for_arl0_1000"] - 1000) < 2.0,
          f"h for ARL0 = 1000: h = {h1000:.10f}, ARL0 there = {res['arl0_at_h_for_arl0_1000']:.6f}")
    print(f"  time  Markov {t1 - t0:.2f}s, simulation {t2 - t1:.2f}s, bisection {t3 - t2:.2f}s")

    # --- EWMA of O - E: formula, Cook, Coory & Webster (2011) style, lambda = 0.01 ---------------------------------------
    z = var = 0.0
    ew, ew_sd = [], []
    lam = EWMA_LAMBDA
    for t in range(n):
        z = (1 - lam) * z + lam * (y[t] - p[t])
        var = (1 - lam) ** 2 * var + lam ** 2 * p[t] * (1 - p[t])
        ew.append(float(z))
        ew_sd.append(math.sqrt(var))
    res["ewma_lambda"] = lam
    res["ewma"] = ew
    res["ewma_sd"] = ew_sd

    with open(os.path.join(OUT, name + ".json"), "w") as f:
        json.dump(res, f, indent=1, allow_nan=False)
        f.write("\n")
    return res


if __name__ == "__main__":
    OUT = sys.argv[1] if len(sys.argv) > 1 else "out"
    print(f"python {sys.version.split()[0]} ({sys.executable}), numpy {np.__version__}, scipy {scipy.__version__}, "
          f"sklearn {sklearn.__version__}, statsmodels {statsmodels.__version__}")
    if "np.searchsorted(bins[1:-1], y_prob)" not in inspect.getsource(sklearn.calibration.calibration_curve):
        print("WARNING: calibration_curve no longer uses np.searchsorted(bins[1:-1], y_prob); re-check the bin rule")
    results = {name: statistics(name, seed_base=20240 + 10 * i) for i, name in enumerate(CASES)}

    # Consistency of case 2 with case 1: qlogis(p') = -0.4 + 1.6 qlogis(p), so the slope fit maps exactly.
    a1, b1 = results["pima-logit"]["cal_slope_intercept"], results["pima-logit"]["cal_slope"]
    a2, b2 = results["pima-miscalibrated"]["cal_slope_intercept"], results["pima-miscalibrated"]["cal_slope"]
    check(rel(1.6 * b2, b1) < 1e-9 and rel(a2 - 0.4 * b2, a1) < 1e-9, "pima-miscalibrated slope fit = pima-logit's mapped")
    check(results["pima-logit"]["auc"] == results["pima-miscalibrated"]["auc"], "AUC unchanged by a monotone map")

    if failures:
        print(f"{len(failures)} check(s) failed:")
        for f_ in failures:
            print("  " + f_)
        sys.exit(1)
    print("all checks passed")
