#!/usr/bin/env bash
# Participant spread in `bandlink simulate` (truth.<parameter>.spread): 40 simulated participants with
# known SDs; the written offsets against chi-square and Kolmogorov-Smirnov references (scipy.stats), one
# offset shared by every level of a term, truth_trials.csv rebuilt from truth.json and power.csv,
# determinism across thread counts, no change at all for a scenario without spread, and bad input.
set -u
. "$(dirname "$0")/lib.sh"
: "${BANDLINK:?}" "${BL_SOURCE_ROOT:?}"
scen="$BL_SOURCE_ROOT/tests/cli/simulate_spread.json"
py=/usr/bin/python3
[ -x "$py" ] || skip "python3 not installed"

# Edit the scenario with python's json module (keys, not text): edit_scenario OUT 'PYTHON STATEMENTS on s'.
edit_scenario() {
    "$py" - "$scen" "$1" "$2" <<'PY'
import json, sys
s = json.load(open(sys.argv[1]))
exec(sys.argv[3])
json.dump(s, open(sys.argv[2], "w"), indent=1)
PY
}

expect_exit 0 "$BANDLINK" simulate "$scen" --out "$tmp/a" --threads 2 --quiet || bail "simulate: $(cat "$BL_ERR")"
expect_exit 0 "$BANDLINK" power "$tmp/a/study.json" --out "$tmp/a_power" --quiet || bail "power: $(cat "$BL_ERR")"

# Determinism: same seed, 1 vs 2 threads -> the same bytes; another seed -> other offsets.
expect_exit 0 "$BANDLINK" simulate "$scen" --out "$tmp/b" --threads 1 --quiet
check "same seed, 1 vs 2 threads: byte-identical study (offsets included)" diff -r "$tmp/a" "$tmp/b"
expect_exit 0 "$BANDLINK" simulate "$scen" --out "$tmp/c" --seed 77 --quiet
tally "$py" - "$tmp/a/truth.json" "$tmp/c/truth.json" <<'PY'
import json, sys
a, c = (json.load(open(p)) for p in sys.argv[1:3])
va = [x["value"] for p in a["participants"] for x in p["coefficients"]]
vc = [x["value"] for p in c["participants"] for x in p["coefficients"]]
differ = sum(x != y for x, y in zip(va, vc))
print(("PASS" if differ > len(va) // 2 else "FAIL") + ": --seed 77 draws other participant offsets (%d of %d "
      "coefficients differ)" % (differ, len(va)))
PY

# Offsets come from their own stream: the trial count does not change them.
edit_scenario "$tmp/short.json" 's["trials_per_participant"] = 10'
expect_exit 0 "$BANDLINK" simulate "$tmp/short.json" --out "$tmp/short" --quiet
tally "$py" - "$tmp/a/truth.json" "$tmp/short/truth.json" <<'PY'
import json, sys
a, b = (json.load(open(p)) for p in sys.argv[1:3])
same = a["participants"] == b["participants"] and a["spread"] == b["spread"]
print(("PASS" if same else "FAIL") + ": 24 vs 10 trials per participant: the same participant coefficients")
PY

# The offsets against their distribution, and truth_trials.csv against the documented formula.
if "$py" -c "import scipy.stats, numpy" 2>/dev/null; then
    tally "$py" - "$tmp/a" "$tmp/a_power/power.csv" <<'PY'
import csv, json, sys
import numpy as np
from scipy import stats
d, power_csv = sys.argv[1], sys.argv[2]
truth = json.load(open(d + "/truth.json"))
ok = True
def check(c, msg):
    global ok
    print(("PASS: " if c else "FAIL: ") + msg)
    ok = ok and bool(c)

sd = {(s["parameter"], s["term"]): s["sd"] for s in truth["spread"]}
check(sd == {("threshold", "intercept"): 0.15, ("threshold", "theta"): 0.05, ("drift", "intercept"): 0.3,
             ("nondecision", "intercept"): 0.03}, "truth.json spread[] lists the four SDs of the scenario")
check(truth["trials_excluded_by_study"] == 0 and truth["regressor_shift_max"] == 0,
      "no trial excluded, regressors as measured")
pop = {(c["parameter"], c["term"], c["level"]): c["value"] for c in truth["coefficients"]}
parts = truth["participants"]
check(len(parts) == 40 and [p["participant"] for p in parts] == ["s%d" % i for i in range(1, 41)],
      "participants[]: 40 entries in scenario order")
layout_ok = all([(c["parameter"], c["term"], c["level"]) for c in p["coefficients"]] ==
                [(c["parameter"], c["term"], c["level"]) for c in truth["coefficients"]] for p in parts)
check(layout_ok, "each participant's coefficients have the population's parameter/term/level layout")

# One offset per participant and term, shared by every level of the term (exact up to rounding).
off = {k: [] for k in sd}
shared = True
for p in parts:
    per_term = {}
    for c in p["coefficients"]:
        key = (c["parameter"], c["term"])
        o = c["value"] - pop[(c["parameter"], c["term"], c["level"])]
        per_term.setdefault(key, []).append(o)
    for key, os_ in per_term.items():
        shared = shared and max(os_) - min(os_) < 1e-12
        if key in off:
            off[key].append(os_[0])
        else:
            shared = shared and max(abs(x) for x in os_) == 0  # no spread given: no offset
check(shared, "one offset per participant and term, the same in every level (none where no SD is given)")

# Sample SD of 40 offsets: (n-1) s^2 / sigma^2 ~ chi-square(n-1) for normal draws (Cochran's theorem;
# scipy.stats.chi2.ppf); a two-sided 99.9% interval.
n = 40
lo, hi = stats.chi2.ppf(0.0005, n - 1), stats.chi2.ppf(0.9995, n - 1)
z_all = []
for key, sigma in sd.items():
    x = np.array(off[key])
    s = np.std(x, ddof=1)
    q = (n - 1) * s * s / sigma ** 2
    check(lo < q < hi, "%s %s: sample SD %.4f of 40 offsets vs SD %g: (n-1)s^2/sd^2 = %.1f in the chi-square(39) "
          "99.9%% interval [%.1f, %.1f]" % (key[0], key[1], s, sigma, q, lo, hi))
    # Mean 0: z = mean / (sigma / sqrt(n)) ~ N(0, 1) (scipy.stats.norm.ppf for the 99.9% bound).
    zm = x.mean() / (sigma / np.sqrt(n))
    check(abs(zm) < stats.norm.ppf(0.9995), "%s %s: mean offset %.4f, z = %.2f (|z| < 3.29)" % (key[0], key[1], x.mean(), zm))
    z_all.extend(x / sigma)
# Normal shape of the 160 standardised offsets: one-sample Kolmogorov-Smirnov test (scipy.stats.kstest).
ks = stats.kstest(z_all, "norm")
check(ks.pvalue > 0.001, "160 standardised offsets vs N(0, 1): Kolmogorov-Smirnov D = %.3f, p = %.3f" % (ks.statistic, ks.pvalue))
# Terms drawn independently: Fisher's z of the correlation, atanh(r) sqrt(n - 3) ~ N(0, 1) under independence.
r = np.corrcoef(off[("threshold", "intercept")], off[("drift", "intercept")])[0, 1]
check(abs(np.arctanh(r)) * np.sqrt(n - 3) < stats.norm.ppf(0.9995),
      "threshold and drift intercept offsets uncorrelated (r = %.3f)" % r)

# truth_trials.csv = participant intercept (population + offset) + participant slope x measured regressor,
# per trial (docs/simulate.md, "How the data are made"), with the regressor from `bandlink power`.
coef = {p["participant"]: {(c["parameter"], c["term"], c["level"]): c["value"] for c in p["coefficients"]}
        for p in parts}
reg = {(r["participant"], r["trial"]): r for r in csv.DictReader(open(power_csv))}
worst, n_rows, n_bad = 0.0, 0, 0
for row in csv.DictReader(open(d + "/truth_trials.csv")):
    who, trial = row["subject"], row["trial"]
    pr = reg[(who, trial)]
    ctx, x = pr["context"], float(pr["theta"])
    c = coef[who]
    want = {"threshold": c[("threshold", "intercept", ctx)] + c[("threshold", "theta", ctx)] * x,
            "drift": c[("drift", "intercept", "")], "nondecision": c[("nondecision", "intercept", "")],
            "start": 0.5, "drift_sd": 0.0, "start_range": 0.0, "nondecision_range": 0.0}
    for k, v in want.items():
        e = abs(float(row[k]) - v)
        worst = max(worst, e)
        n_bad += e > 1e-12
    n_rows += 1
check(n_rows == 960 and n_bad == 0, "truth_trials.csv: %d trials = intercept + offset + (slope + offset) x regressor "
      "(largest difference %.2g)" % (n_rows, worst))
# Every RT lies above its trial's true non-decision time (the sampler adds a positive decision time).
tt = {(r["subject"], r["trial"]): float(r["nondecision"]) for r in csv.DictReader(open(d + "/truth_trials.csv"))}
above = all(float(r["rt"]) > tt[(r["subject"], r["trial"])] for r in csv.DictReader(open(d + "/trials.csv")))
check(above, "every RT is above its trial's nondecision (participant offset included)")
sys.exit(0 if ok else 1)
PY
else
    echo "SKIP: python3 scipy/numpy not installed; distribution checks skipped"
fi

# Without spread: exactly the files of before (truth.json without spread/participants); with every SD 0:
# the same trials, recordings and true parameters (the offsets' stream disturbs no other draw).
edit_scenario "$tmp/none.json" 'for p in s["truth"].values(): p.pop("spread", None)'
edit_scenario "$tmp/zero.json" 'for p in s["truth"].values(): p["spread"] = {k: 0 for k in p["spread"]}'
expect_exit 0 "$BANDLINK" simulate "$tmp/none.json" --out "$tmp/none" --quiet
expect_exit 0 "$BANDLINK" simulate "$tmp/zero.json" --out "$tmp/zero" --quiet
check_eval "no spread: truth.json has neither spread nor participants" \
    "! grep -q '\"spread\"\\|\"participants\"' '$tmp/none/truth.json'"
check_eval "every SD 0: trials.csv, truth_trials.csv and recordings identical to no spread" \
    "cmp -s '$tmp/none/trials.csv' '$tmp/zero/trials.csv' && cmp -s '$tmp/none/truth_trials.csv' '$tmp/zero/truth_trials.csv' \
     && diff -r '$tmp/none/recordings' '$tmp/zero/recordings' >/dev/null"
check_eval "a spread changes the true parameters" "! cmp -s '$tmp/none/truth_trials.csv' '$tmp/a/truth_trials.csv'"

# Bad input: exit 2, the key path and the value named, nothing written.
bad_case() { # NAME 'PYTHON EDIT' REGEX
    edit_scenario "$tmp/bad_$1.json" "$2"
    expect_exit 2 "$BANDLINK" simulate "$tmp/bad_$1.json" --out "$tmp/out_$1" && expect_stderr_match "$3" "$1: $3"
    check_eval "$1: nothing written" "[ ! -e '$tmp/out_$1' ]"
}
bad_case unknown_term 's["truth"]["threshold"]["spread"]["gamma"] = 0.1' \
    "truth\.threshold\.spread\.gamma: 'gamma' is not a term of this parameter \(terms: intercept, theta\)"
bad_case slope_of_other 's["truth"]["drift"]["spread"]["theta"] = 0.1' \
    "truth\.drift\.spread\.theta: 'theta' is not a term of this parameter \(terms: intercept\)"
bad_case negative 's["truth"]["drift"]["spread"]["intercept"] = -0.3' \
    "truth\.drift\.spread\.intercept: -0\.3 is negative"
bad_case not_number 's["truth"]["nondecision"]["spread"]["intercept"] = "wide"' \
    "truth\.nondecision\.spread\.intercept: must be a number"
bad_case not_object 's["truth"]["nondecision"]["spread"] = [0.03]' \
    "truth\.nondecision\.spread: must be an object"
bad_case misspelt 's["truth"]["nondecision"]["sprad"] = s["truth"]["nondecision"].pop("spread")' \
    "truth\.nondecision\.sprad: unknown key"
# Too wide a spread makes some participant's non-decision time negative: an error naming participant and trial.
bad_case too_wide 's["truth"]["nondecision"]["spread"]["intercept"] = 0.5' \
    "truth gives invalid parameters for s[0-9]+ trial [0-9]+: nondecision must be >= 0 s .*spread smaller"
# A spread on a parameter the truth model does not estimate (start is fixed at 0.5 by default).
bad_case fixed 's["truth"]["start"] = {"intercept": 0.5, "spread": {"intercept": 0.05}}' \
    "truth\.start\.spread\.intercept: 0\.05, but model 'theta-threshold' fixes start"
# A key given twice (JSON text, since json.dump cannot write one).
sed 's/"spread": {"intercept": 0.3}/"spread": {"intercept": 0.3, "intercept": 0.2}/' "$scen" >"$tmp/twice.json"
expect_exit 2 "$BANDLINK" simulate "$tmp/twice.json" --out "$tmp/out_twice" \
    && expect_stderr_match "truth\.drift\.spread\.intercept: key given twice"

finish
