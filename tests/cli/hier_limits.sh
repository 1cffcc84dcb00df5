#!/usr/bin/env bash
# Hierarchical fits at their limits.
# (a) Spread -> 0: the model with the participants' SD at zero IS the pooled model, so the spread test
#     statistic must equal 2 x (hierarchical LL - pooled LL), the pooled LL from a separate
#     "participants": "pooled" fit of the same model (to 1e-3), and its p-value the boundary mixture
#     1/2 chi2_0 + 1/2 chi2_1 (Self & Liang 1987; Stram & Lee 1994): p = 1/2 P(chi2_1 > T) = 1/2 erfc(sqrt(T/2))
#     (closed form, Python's math.erfc), 1 at T = 0. Once on data with no spread (the SD estimate should
#     be ~0, the two fits' LL equal), once on data with spread (a positive statistic).
# (b) Many trials per participant: the empirical-Bayes (conditional mode) estimates tend to each
#     participant's own maximum-likelihood fit ("participants": "separate") as the trials grow: the
#     shrinkage is about (SE/SD) x (distance from the population in SDs) standard errors. With 3
#     participants x 2,500 trials and a large spread (threshold SD 0.6, drift SD 1.4), every EB coefficient
#     is within 0.1 of its separate SE of the separate estimate. The shrinkage itself is then checked
#     against its Gaussian form: with I = the separate fit's inverse covariance and S = diag(SD^2), the
#     mode of l_j(theta) - (theta - beta)' S^-1 (theta - beta) / 2 for a quadratic l_j is
#     (I + S^-1)^-1 (I x + S^-1 beta) (the normal-normal posterior mode), which must match the EB
#     estimates to 0.005 SE. Measured when written: at most 0.048 SE from the separate fits, 1e-4 SE from
#     the Gaussian form. Nondecision is fixed there (hier_eb_nondecision.sh varies it).
# Data: invented trials drawn by tests/reference/hier_reference.py's seeded random walk (numpy).
set -u
. "$(dirname "$0")/lib.sh"
: "${BANDLINK:?}" "${BL_SOURCE_ROOT:?}"
py=/usr/bin/python3
ref="$BL_SOURCE_ROOT/tests/reference/hier_reference.py"
[ -x "$py" ] || skip "no /usr/bin/python3"
"$py" -c 'import numpy' 2>/dev/null || skip "python3-numpy missing"
cd "$tmp" || bail "cd $tmp"

# study FILE MODE TRIALS MODEL_PARAMETERS
study() {
  cat > "$1" <<JSON
{"trials": {"file": "$3", "participant": "participant", "rt": "rt", "response": "correct", "upper": ["1"]},
 "fit": {"participants": "$2"},
 "models": [{"name": "m", $4}]}
JSON
}

# (a) One varying term, the threshold intercept; everything else the same in both fits.
"$py" "$ref" trials nospread.csv 4 150 5 0 0 0 || bail "trials"
"$py" "$ref" trials spread.csv 4 150 5 0.3 0 0 || bail "trials"
for d in nospread spread; do
  study "${d}_h.json" hierarchical "$d.csv" \
    '"threshold": {"varies": ["intercept"]}, "drift": {"per": ["difficulty"], "varies": []}, "nondecision": {"varies": []}'
  study "${d}_p.json" pooled "$d.csv" '"threshold": {}, "drift": {"per": ["difficulty"]}, "nondecision": {}'
  expect_exit 0 "$BANDLINK" fit "${d}_h.json" --out "${d}_h" --quiet
  expect_exit 0 "$BANDLINK" fit "${d}_p.json" --out "${d}_p" --quiet
done
tally "$py" - <<'PY'
import json, math
def model(path):
    with open(path) as f:
        return json.load(f)["models"][0]
for d in ("nospread", "spread"):
    h, p = model(d + "_h/fits.json"), model(d + "_p/fits.json")
    vc = h["variance_components"]
    ok = len(vc) == 1 and vc[0]["parameter"] == "threshold" and vc[0]["lrt_statistic"] is not None
    print("%s: %s: one variance component with a statistic" % ("PASS" if ok else "FAIL", d))
    if not ok:
        continue
    t, sd = vc[0]["lrt_statistic"], vc[0]["sd"]
    twice = 2 * (h["log_likelihood"] - p["log_likelihood"])
    print("%s: %s: spread statistic %.6f = 2 x (hierarchical %.6f - pooled %.6f) = %.6f (1e-3)"
          % ("PASS" if abs(t - twice) <= 1e-3 else "FAIL", d, t, h["log_likelihood"], p["log_likelihood"], twice))
    # the hierarchical model contains the pooled one: its maximum is not lower
    print("%s: %s: hierarchical LL >= pooled LL - 1e-3 (%.3g)"
          % ("PASS" if twice >= -2e-3 else "FAIL", d, twice / 2))
    print("%s: %s: one spread parameter more than the pooled fit (%d vs %d)"
          % ("PASS" if h["parameters"] == p["parameters"] + 1 else "FAIL", d, h["parameters"], p["parameters"]))
    want = 1.0 if t <= 0 else 0.5 * math.erfc(math.sqrt(t / 2))
    print("%s: %s: lrt_p %.6g = 1/2 P(chi2_1 > T) = %.6g (Self & Liang 1987; rel 1e-9)"
          % ("PASS" if abs(vc[0]["lrt_p"] - want) <= 1e-9 * max(want, 1e-300) else "FAIL", d, vc[0]["lrt_p"], want))
    if d == "nospread":
        print("%s: nospread: SD estimate %.3g ~ 0 (< 0.05), statistic %.3g < 1"
              % ("PASS" if abs(sd) < 0.05 and t < 1 else "FAIL", sd, t))
    else:
        print("%s: spread: SD estimate %.3g in (0.1, 0.6) (generated 0.3 x spaced offsets), statistic %.3g > 10"
              % ("PASS" if 0.1 < sd < 0.6 and t > 10 else "FAIL", sd, t))
PY

# (b) Many trials per participant, threshold and drift varying (nondecision fixed at the generated 0.3).
"$py" "$ref" trials many.csv 3 2500 11 0.6 1.4 0 easy || bail "trials"
params='"threshold": {}, "drift": {}, "nondecision": {"fixed": 0.3}'
study many_h.json hierarchical many.csv "$params"
study many_s.json separate many.csv "$params"
expect_exit 0 "$BANDLINK" fit many_h.json --out many_h --quiet
expect_exit 0 "$BANDLINK" fit many_s.json --out many_s --quiet
tally "$py" - <<'PY'
import json
import numpy as np
with open("many_h/fits.json") as f:
    h = json.load(f)["models"][0]
with open("many_s/fits.json") as f:
    s = json.load(f)["models"][0]
names = [c["parameter"] for c in h["coefficients"]]
beta = np.array([c["estimate"] for c in h["coefficients"]])
sd = {v["parameter"]: abs(v["sd"]) for v in h["variance_components"]}
print("%s: both intercepts vary (%s)" % ("PASS" if sorted(sd) == ["drift", "threshold"] else "FAIL", sorted(sd)))
S_inv = np.diag([1 / sd[n] ** 2 for n in names])
sep = {p["participant"]: p for p in s["participants"]}
worst = worst_gauss = 0.0
for eb in h["participants"]:
    sp = sep[eb["participant"]]
    assert [c["parameter"] for c in sp["coefficients"]] == names == [c["parameter"] for c in eb["coefficients"]]
    x = np.array([c["estimate"] for c in sp["coefficients"]])
    se = np.array([c["se"] for c in sp["coefficients"]])
    u = np.array([c["estimate"] for c in eb["coefficients"]])
    info = np.linalg.inv(np.array(sp["covariance"]))
    gauss = np.linalg.solve(info + S_inv, info @ x + S_inv @ beta)
    for k, n in enumerate(names):
        d, g = (u[k] - x[k]) / se[k], (u[k] - gauss[k]) / se[k]
        worst, worst_gauss = max(worst, abs(d)), max(worst_gauss, abs(g))
        print("%s: %s %s: EB %.5f vs separate %.5f: %.3f SE (<= 0.1)"
              % ("PASS" if abs(d) <= 0.1 else "FAIL", eb["participant"], n, u[k], x[k], d))
        print("%s: %s %s: EB %.5f vs normal-normal mode %.5f: %.4f SE (<= 0.005)"
              % ("PASS" if abs(g) <= 0.005 else "FAIL", eb["participant"], n, u[k], gauss[k], g))
print("largest: %.3f SE from the separate fits, %.4f SE from the Gaussian form" % (worst, worst_gauss))
PY
finish
