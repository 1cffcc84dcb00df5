#!/usr/bin/env bash
# Profile-likelihood intervals of nondecision and the variability parameters, checked through the fitter
# itself: a model with the coefficient FIXED at a reported end, fitted by the ordinary optimiser, must be
# 2 (LL_full - LL_fixed) = the chi-square(1) 95% point (scipy.stats.chi2.ppf(0.95, 1) = 3.8415) below the
# full model, to 0.02 (the search stops when sqrt of that statistic is within 1e-3 of 1.96: 0.004 in the
# statistic, plus both fits' convergence); an end at 0 must have the statistic at 0 below that point
# (Wilks 1938: the likelihood ratio of one fixed coefficient is chi-square(1); the interval is the set of
# values that test does not reject). The estimate lies inside its interval; fits.json, the summary and
# report.html carry the intervals; the plain model's nondecision gets one too.
# Data: an invented one-animal study drawn by `bandlink simulate` (engine sampler) with all three
# variability parameters.
set -u
. "$(dirname "$0")/lib.sh"
: "${BANDLINK:?}"
py=/usr/bin/python3
[ -x "$py" ] || skip "no /usr/bin/python3"
"$py" -c 'import scipy.stats' 2>/dev/null || skip "python3-scipy missing"
cd "$tmp" || bail "cd $tmp"

cat > scenario.json <<'JSON'
{
  "name": "one animal with across-trial variability (invented)",
  "seed": 606,
  "participants": {"column": "animal", "labels": ["v1"]},
  "trials_per_participant": 800,
  "conditions": {"difficulty": ["easy", "hard"]},
  "stimulus": {"column": "tone", "levels": ["higher", "lower"], "choice_column": "choice"},
  "timing": {"first_onset": 1.0, "interval": [1.6, 2.0], "tail": 2.5},
  "recording": {
    "format": "flac", "rate": 500, "contacts": 1, "channels": ["1"], "unit": "uV", "full_scale": 4000,
    "background": {"rms": 20, "exponent": 1.0}
  },
  "bursts": {"theta": {"frequency": [5, 8], "from": -0.8, "to": 0.05, "amplitude": 30, "variability": 0.6,
             "contacts": [1.0]}},
  "truth": {
    "threshold": {"intercept": 1.6},
    "drift": {"per": ["difficulty"], "intercept": {"easy": 2.0, "hard": 0.8}},
    "nondecision": {"intercept": 0.3},
    "drift_sd": {"intercept": 0.8}, "start_range": {"intercept": 0.3}, "nondecision_range": {"intercept": 0.1}
  },
  "study": {
    "keep": {"rt_min": 0.1, "rt_max": 6.0},
    "power": {"window": {"align": "onset", "from": -0.75, "to": 0.0}, "segment": 0.5, "overlap": 0.5,
              "bands": {"theta": [4, 10]}, "scale": "log10", "standardize": "participant"},
    "models": [
      {"name": "plain", "threshold": {}, "drift": {"per": ["difficulty"]}, "nondecision": {}},
      {"name": "full", "threshold": {}, "drift": {"per": ["difficulty"]}, "nondecision": {},
       "drift_sd": {}, "start_range": {}, "nondecision_range": {}}
    ],
    "truth_model": "full"
  }
}
JSON
# The same animal without variability, for a model with contamination: on these data (seed 606) its
# maximum lies on the edge, contamination = 0.
"$py" - <<'PY'
import json
with open("scenario.json") as f:
    s = json.load(f)
for k in ("drift_sd", "start_range", "nondecision_range"):
    s["truth"].pop(k)
s["study"]["models"] = [
    {"name": "plain", "threshold": {}, "drift": {"per": ["difficulty"]}, "nondecision": {}},
    {"name": "plain-cont", "threshold": {}, "drift": {"per": ["difficulty"]}, "nondecision": {}, "contamination": {}}]
s["study"]["truth_model"] = "plain"
with open("scenario_plain.json", "w") as f:
    json.dump(s, f)
PY
expect_exit 0 "$BANDLINK" simulate scenario.json --out sim --quiet --threads 2
expect_exit 0 "$BANDLINK" simulate scenario_plain.json --out simp --quiet --threads 2
expect_exit 0 "$BANDLINK" run sim/study.json --out res --threads 2 --quiet
expect_exit 0 "$BANDLINK" fit simp/study.json --out resp --threads 2 --quiet
"$BANDLINK" fit sim/study.json --out res2 --threads 2 > summary.txt 2>&1
check_eval "the summary lists profile intervals" 'grep -q "Profile-likelihood 95% intervals" summary.txt'
check_eval "report.html has the profile interval column" 'grep -q "95% profile CI" res/report.html'

# One model per reported end (the model with that coefficient fixed there), fitted by the optimiser.
tally "$py" - <<'PY'
import json
def load(path):
    with open(path) as f:
        return {m["name"]: m for m in json.load(f)["models"]}
fits, fitsp = load("res/fits.json"), load("resp/fits.json")
full, plain, cont = fits["full"], fits["plain"], fitsp["plain-cont"]
def prof(m):
    return [c for c in m["coefficients"] if "profile_ci_low" in c]
def ok(cond, what):
    print("%s: %s" % ("PASS" if cond else "FAIL", what))
ok([c["parameter"] for c in prof(full)] == ["nondecision", "drift_sd", "start_range", "nondecision_range"],
   "full model: profile intervals of nondecision and the three variability parameters, and only those")
ok([c["parameter"] for c in prof(plain)] == ["nondecision"], "plain model: nondecision has a profile interval")
# No contamination in the data: its maximum lies on the edge, held at exactly 0 (docs/models.md section 4):
# converged, no Wald SE, its covariance row 0, the profile interval from 0.
cc = [c for c in cont["coefficients"] if c["parameter"] == "contamination"][0]
ok(cont["converged"], "contamination at the edge: the fit is reported converged")
ok(cc["estimate"] == 0 and cc["se"] is None and cc["profile_ci_low"] == 0 and cc["profile_ci_high"] > 0,
   "contamination held at 0: no SE, profile interval [0, %s]" % cc["profile_ci_high"])
j = cont["coefficients"].index(cc)
ok(all(v == 0 for v in cont["covariance"][j]), "its covariance row is 0")
ok(all(c["se"] is not None for c in cont["coefficients"] if c is not cc), "the other coefficients have SEs")
for c in prof(full) + prof(plain) + prof(cont):
    lo, hi, b = c["profile_ci_low"], c["profile_ci_high"], c["estimate"]
    ok(lo is not None and hi is not None and lo <= b <= hi, "%s: %s <= %s <= %s" % (c["parameter"], lo, b, hi))
for sim, name, res in (("sim", "full", full), ("simp", "plain-cont", cont)):
    with open(sim + "/study.json") as f:
        study = json.load(f)
    base = [m for m in study["models"] if m["name"] == name][0]
    models = [base]
    for c in prof(res):
        for end in ("profile_ci_low", "profile_ci_high"):
            m = json.loads(json.dumps(base))
            m["name"] = "%s/%s-%s" % (name, c["parameter"], end.split("_")[-1])
            m[c["parameter"]] = {"fixed": c[end]}
            models.append(m)
    study["models"] = models
    study.pop("truth_model", None)
    with open(sim + "/fixed.json", "w") as f:
        json.dump(study, f)
PY
expect_exit 0 "$BANDLINK" fit sim/fixed.json --out fixed --threads 2 --quiet
expect_exit 0 "$BANDLINK" fit simp/fixed.json --out fixedp --threads 2 --quiet
tally "$py" - <<'PY'
import json
from scipy.stats import chi2
q = chi2.ppf(0.95, 1)
for res, sim in (("fixed", "sim"), ("fixedp", "simp")):
    with open(res + "/fits.json") as f:
        ms = json.load(f)["models"]
    with open(sim + "/fixed.json") as f:
        fixed_at = {m["name"]: m for m in json.load(f)["models"]}
    ll = {m["name"]: m["log_likelihood"] for m in ms if "/" not in m["name"]}
    for m in ms:
        if "/" not in m["name"]:
            continue
        base, rest = m["name"].split("/")
        stat = 2 * (ll[base] - m["log_likelihood"])
        par = rest.rsplit("-", 1)[0]
        value = fixed_at[m["name"]][par]["fixed"]
        if value == 0:
            good = stat <= q and m["converged"]
            print("%s: %s: an end at 0, the edge of the range: statistic %.4f at most %.4f" % (
                "PASS" if good else "FAIL", m["name"], stat, q))
        else:
            good = abs(stat - q) <= 0.02 and m["converged"]
            print("%s: %s at %.6g: 2 (LL_model - LL_fixed) = %.4f, chi-square(1) 95%% point %.4f" % (
                "PASS" if good else "FAIL", m["name"], value, stat, q))
PY
finish
