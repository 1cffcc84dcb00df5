#!/usr/bin/python3
"""Live reference check of `bandlink fit` outputs against independent computations in numpy/scipy.

- trials.csv: each trial's log_likelihood equals the log first-passage density at its RT and response,
  computed here from the predicted parameters with the two classic series (Feller 1968; Navarro & Fuss 2009,
  J. Math. Psych. 53:222-230) summed to many terms in float64; p_upper equals the closed-form absorption
  probability (Feller 1968; Cox & Miller 1965), mean_rt the Wald identity E[T] = (a P_up - z)/v plus t0.
- the per-trial values sum to the model's log-likelihood.
- comparison.csv: AIC/BIC (Akaike 1974; Schwarz 1978), Akaike weights, LRT p from scipy.stats.chi2.sf.
- fits.json: Wald p from scipy.stats.norm.sf, 95% interval with scipy.stats.norm.ppf(0.975).
usage: fit_reference.py BANDLINK FIT_MAKE_TRIALS   (exit 77 when numpy/scipy are missing)
"""
import csv
import json
import math
import os
import subprocess
import sys
import tempfile

try:
    import numpy as np
    from scipy import stats
except ImportError:
    print("numpy/scipy not available: skipped")
    sys.exit(77)

bandlink, maker = sys.argv[1], sys.argv[2]
fails = 0


def check(ok, what):
    global fails
    print(("PASS: " if ok else "FAIL: ") + what)
    if not ok:
        fails += 1


def log_density_lower(t, v, a, w):
    """log f at the lower boundary, s = 1: small-time series for u < 1, large-time otherwise, many terms."""
    u = t / (a * a)
    if u < 1.0:
        k = np.arange(-30, 31)
        x = w + 2 * k
        s = np.sum(x * np.exp(-x * x / (2 * u)))
        logphi = math.log(s) - 0.5 * math.log(2 * math.pi * u ** 3)
    else:
        k = np.arange(1, 200)
        s = np.sum(k * np.exp(-k * k * math.pi ** 2 * u / 2) * np.sin(k * math.pi * w))
        logphi = math.log(math.pi * s)
    return -v * a * w - v * v * t / 2 - 2 * math.log(a) + logphi


def p_lower(v, a, w):
    if abs(v * a) < 1e-12:
        return 1 - w
    return (math.exp(-2 * v * a * w) - math.exp(-2 * v * a)) / (1 - math.exp(-2 * v * a))


with tempfile.TemporaryDirectory() as tmp:
    subprocess.run([maker, os.path.join(tmp, "trials.csv"), "200", "3", "31"], check=True)
    study = {
        "trials": {"file": "trials.csv", "participant": "animal", "rt": "rt", "response": "correct", "upper": ["1"]},
        "fit": {"starts": 2, "participants": "pooled"},
        "models": [
            {"name": "baseline", "threshold": {"per": ["context"]}, "drift": {"per": ["difficulty"]}},
            {"name": "theta-threshold", "extends": "baseline",
             "threshold": {"per": ["context"], "slopes": {"theta": ["context"]}}},
            {"name": "free-start", "extends": "theta-threshold", "start": {"per": []}},
        ],
        "output": "out",
    }
    with open(os.path.join(tmp, "study.json"), "w") as f:
        json.dump(study, f)
    subprocess.run([bandlink, "fit", os.path.join(tmp, "study.json"), "--quiet"], check=True)
    trials = {(r["animal"], r["trial"]): r for r in csv.DictReader(open(os.path.join(tmp, "trials.csv")))}
    rows = list(csv.DictReader(open(os.path.join(tmp, "out", "trials.csv"))))
    comp = list(csv.DictReader(open(os.path.join(tmp, "out", "comparison.csv"))))
    fits = json.load(open(os.path.join(tmp, "out", "fits.json")))

    sums = {}
    worst_ll = worst_p = worst_m = 0.0
    for r in rows:
        tr = trials[(r["participant"], r["trial"])]
        a, v, t0, w = (float(r[k]) for k in ("threshold", "drift", "nondecision", "start"))
        rt, up = float(tr["rt"]), tr["correct"] == "1"
        # Upper boundary by the mirror rule f_up(t | v, w) = f_lo(t | -v, 1 - w).
        ll = log_density_lower(rt - t0, -v, a, 1 - w) if up else log_density_lower(rt - t0, v, a, w)
        worst_ll = max(worst_ll, abs(ll - float(r["log_likelihood"])) / max(1.0, abs(ll)))
        pu = 1 - p_lower(v, a, w)
        worst_p = max(worst_p, abs(pu - float(r["p_upper"])))
        mean = t0 + (a * pu - a * w) / v
        worst_m = max(worst_m, abs(mean - float(r["mean_rt"])) / mean)
        sums[r["model"]] = sums.get(r["model"], 0.0) + float(r["log_likelihood"])
    check(worst_ll < 1e-8, "trials.csv log_likelihood = independent series density (worst rel. diff %.2e)" % worst_ll)
    check(worst_p < 1e-10, "trials.csv p_upper = closed-form absorption probability (worst diff %.2e)" % worst_p)
    check(worst_m < 1e-8, "trials.csv mean_rt = t0 + Wald identity (worst rel. diff %.2e)" % worst_m)

    best_aic = min(float(c["aic"]) for c in comp)
    weights = [math.exp(-0.5 * (float(c["aic"]) - best_aic)) for c in comp]
    for c, wt in zip(comp, weights):
        k, n, ll = int(c["parameters"]), int(c["trials"]), float(c["log_likelihood"])
        check(abs(sums[c["name"]] - ll) < 1e-8 * abs(ll), "%s: per-trial values sum to the log-likelihood" % c["name"])
        check(abs(float(c["aic"]) - (2 * k - 2 * ll)) < 1e-9, "%s: AIC = 2k - 2LL" % c["name"])
        check(abs(float(c["bic"]) - (k * math.log(n) - 2 * ll)) < 1e-9, "%s: BIC = k ln n - 2LL" % c["name"])
        check(abs(float(c["aic_weight"]) - wt / sum(weights)) < 1e-12, "%s: Akaike weight" % c["name"])
        if c["lrt_nested"] == "yes":
            base = next(b for b in comp if b["name"] == c["lrt_against"])
            stat = 2 * (ll - float(base["log_likelihood"]))
            df = k - int(base["parameters"])
            check(abs(float(c["lrt_statistic"]) - stat) < 1e-9 and float(c["lrt_df"]) == df,
                  "%s: LR statistic and df" % c["name"])
            p = stats.chi2.sf(max(stat, 0), df)
            check(abs(float(c["lrt_p"]) - p) <= 1e-12 + 1e-9 * p, "%s: LRT p = scipy chi2.sf (%.3g)" % (c["name"], p))
    check([c["lrt_nested"] for c in comp] == ["NA", "yes", "yes"], "nesting: NA, yes, yes")

    z975 = stats.norm.ppf(0.975)
    worst = 0.0
    for m in fits["models"]:
        for co in m["coefficients"]:
            z = co["estimate"] / co["se"]
            worst = max(worst, abs(co["z"] - z), abs(co["p"] - 2 * stats.norm.sf(abs(z))),
                        abs(co["ci_low"] - (co["estimate"] - z975 * co["se"])),
                        abs(co["ci_high"] - (co["estimate"] + z975 * co["se"])))
    check(worst < 1e-12, "Wald z, p and 95%% intervals = scipy.stats.norm (worst diff %.2e)" % worst)
    start = [co for co in fits["models"][2]["coefficients"] if co["parameter"] == "start"][0]
    check(start["ci_low"] < 0.5 < start["ci_high"], "free start: the unbiased truth 0.5 is inside its interval")

    # Hierarchical fit of the same data: terms that vary by participant take the t reference with
    # participants - 1 df (scipy.stats.t), the others the normal one (scipy.stats.norm); AIC/BIC from the
    # marginal log-likelihood with coefficients + spread parameters counted.
    study["fit"] = {"starts": 2, "participants": "hierarchical"}
    study["models"] = study["models"][:2]
    study["output"] = "out_h"
    with open(os.path.join(tmp, "study_h.json"), "w") as f:
        json.dump(study, f)
    subprocess.run([bandlink, "fit", os.path.join(tmp, "study_h.json"), "--quiet"], check=True)
    fits_h = json.load(open(os.path.join(tmp, "out_h", "fits.json")))
    worst, n_t, n_z = 0.0, 0, 0
    for m in fits_h["models"]:
        check(m["mode"] == "hierarchical", "%s: fitted hierarchically" % m["name"])
        n_spread = len(m["variance_components"])
        check(int(m["parameters"]) == len(m["coefficients"]) + n_spread, "%s: parameters = coefficients + spread" % m["name"])
        k, ll, n = int(m["parameters"]), float(m["log_likelihood"]), int(m["trials"])
        check(abs(float(m["aic"]) - (2 * k - 2 * ll)) < 1e-9 and abs(float(m["bic"]) - (k * math.log(n) - 2 * ll)) < 1e-9,
              "%s: AIC and BIC from the marginal log-likelihood" % m["name"])
        for co in m["coefficients"]:
            z = co["estimate"] / co["se"]
            if "df" in co:
                n_t += 1
                check(co["df"] == 2, "t reference with participants - 1 = 2 df")
                crit, p = stats.t.ppf(0.975, co["df"]), 2 * stats.t.sf(abs(z), co["df"])
            else:
                n_z += 1
                crit, p = z975, 2 * stats.norm.sf(abs(z))
            worst = max(worst, abs(co["z"] - z), abs(co["p"] - p), abs(co["ci_low"] - (co["estimate"] - crit * co["se"])),
                        abs(co["ci_high"] - (co["estimate"] + crit * co["se"])))
    check(n_t > 0 and n_z > 0, "hierarchical: both references used (%d t, %d normal)" % (n_t, n_z))
    check(worst < 1e-10, "hierarchical z, p and 95%% intervals = scipy.stats.t / norm (worst diff %.2e)" % worst)

print("%d failed" % fails)
sys.exit(1 if fails else 0)
