#!/usr/bin/env bash
# Slow statistical check of simulate + run together: over many seeds of the small scenario, the 95% Wald
# intervals of the true model should cover the true coefficients about 95% of the time (Neyman's
# definition of a confidence interval), and the estimates should be unbiased within Monte-Carlo error.
# Usage: run_coverage.sh [SEEDS]   (default 60)
set -u
. "$(dirname "$0")/lib.sh"
: "${BANDLINK:?}" "${BL_SOURCE_ROOT:?}"
seeds=${1:-60}
py=/usr/bin/python3
[ -x "$py" ] || skip "/usr/bin/python3 missing"
for s in $(seq 1 "$seeds"); do
    # pooled, named: this checks the pooled pipeline on data without participant spread (hierarchical
    # coverage on heterogeneous data is the hier-coverage test)
    "$BANDLINK" simulate "$BL_SOURCE_ROOT/tests/cli/simulate_small.json" --out "$tmp/s$s" --seed "$s" --quiet --threads 2 \
        && sed -i 's/"models":/"fit": {"participants": "pooled"}, "models":/' "$tmp/s$s/study.json" \
        && "$BANDLINK" run "$tmp/s$s/study.json" --out "$tmp/r$s" --quiet --threads 2 || bail "seed $s"
done
tally "$py" - "$tmp" "$seeds" <<'PY'
import json, math, sys
d, n = sys.argv[1], int(sys.argv[2])
cover, total, missing, ok = 0, 0, 0, True
per = {}
for s in range(1, n + 1):
    truth = json.load(open("%s/s%d/truth.json" % (d, s)))
    fits = json.load(open("%s/r%d/fits.json" % (d, s)))
    m = next(m for m in fits["models"] if m["name"] == truth["model"])
    est = {(c["parameter"], c["term"], c["level"]): c for c in m["coefficients"]}
    for t in truth["coefficients"]:
        c = est[(t["parameter"], t["term"], t["level"])]
        k = (t["parameter"], t["term"], t["level"])
        total += 1
        if c["se"] is None:
            missing += 1
            print("note: seed %d: %s %s [%s] has no SE (converged %s)" % (s, k[0], k[1], k[2], m["converged"]))
            continue
        per.setdefault(k, []).append((c["estimate"] - t["value"]) / c["se"])
        cover += c["ci_low"] <= t["value"] <= c["ci_high"]
good = missing <= 0.02 * total
print(("PASS: " if good else "FAIL: ") + "%d of %d coefficients without a standard error" % (missing, total))
ok = ok and good
total -= missing
rate = cover / total
sd = math.sqrt(0.95 * 0.05 / total)
good = abs(rate - 0.95) <= 3 * sd + 0.01
print(("PASS: " if good else "FAIL: ") + "coverage %.3f over %d intervals (95%% expected, +- %.3f)" % (rate, total, 3 * sd + 0.01))
ok = ok and good
for k, z in per.items():
    mz = sum(z) / len(z)
    good = abs(mz) <= 3 / math.sqrt(len(z)) + 0.1
    print(("PASS: " if good else "FAIL: ") + "%s %s [%s]: mean standardised error %.2f over %d seeds" % (k + (mz, len(z))))
    ok = ok and good
sys.exit(0 if ok else 1)
PY
finish
