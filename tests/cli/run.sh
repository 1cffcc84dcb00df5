#!/usr/bin/env bash
# bandlink run end to end on a small simulated study: every output file and its columns/keys, the truth
# recovered within the confidence intervals, the truth sitting on the measured regressor, byte-identical
# outputs for the same seed (apart from times), no-clobber and --force, the summary and --quiet.
set -u
. "$(dirname "$0")/lib.sh"
: "${BANDLINK:?}" "${BL_SOURCE_ROOT:?}"
py=/usr/bin/python3
[ -x "$py" ] || py=$(command -v python3)

"$BANDLINK" simulate "$BL_SOURCE_ROOT/tests/cli/simulate_small.json" --out "$tmp/study" --quiet \
    || bail "simulate"
"$BANDLINK" run "$tmp/study/study.json" --out "$tmp/r1" --threads 2 --seed 7 >"$tmp/out1" 2>"$tmp/err1"; rc=$?
[ $rc -eq 0 ] && pass "run exits 0" || bail "run failed ($rc): $(cat "$tmp/err1")"
for f in power.csv fits.json comparison.csv trials.csv fit_quantiles.csv report.html; do
    [ -s "$tmp/r1/$f" ] && pass "$f written" || fail "$f missing"
done
[ -d "$tmp/r1/figures" ] && [ -n "$(ls "$tmp/r1/figures"/*.svg 2>/dev/null)" ] && pass "figures/ holds SVG files" \
    || fail "figures/ missing or empty"
ls -a "$tmp" | grep -q partial && fail "a staging folder was left behind" || pass "no staging folder left"

# Summary on stdout.
grep -q "^Model comparison" "$tmp/out1" && grep -q "^Best model by AIC: " "$tmp/out1" \
    && grep -q "threshold: slope on theta \[rich\]" "$tmp/out1" && pass "summary: comparison table and best model's slopes" \
    || fail "summary: $(cat "$tmp/out1")"
for s in power fits goodness figures report; do
    grep -Eq "^  $s +[0-9.]+ s +[0-9.]+%" "$tmp/out1" || fail "timings: no line for stage $s"
done
grep -q "report: $tmp/r1/report.html" "$tmp/out1" && pass "summary names the report" || fail "report path not printed"

# Columns and keys (docs/outputs.md) and the truth.
tally "$py" - "$tmp/r1" "$tmp/study" <<'PY'
import csv, json, math, sys
r, s = sys.argv[1], sys.argv[2]
ok = True
def check(c, msg):
    global ok
    print(("PASS: " if c else "FAIL: ") + msg)
    ok = ok and c
def header(p):
    with open(p) as f:
        return next(csv.reader(f))
def rows(p):
    with open(p) as f:
        return list(csv.DictReader(f))
h = header(r + "/power.csv")
check(h[:2] == ["participant", "trial"] and all(c in h for c in ["theta_power", "theta", "beta_power", "beta", "artifact"])
      and all(c in h for c in ["onset", "difficulty", "context", "rt", "correct"]), "power.csv columns: %s" % h)
check(header(r + "/comparison.csv") == ["name", "parameters", "trials", "log_likelihood", "aic", "bic", "delta_aic",
      "delta_bic", "aic_weight", "lrt_against", "lrt_nested", "lrt_statistic", "lrt_df", "lrt_p"], "comparison.csv columns")
check(header(r + "/trials.csv") == ["model", "participant", "trial", "threshold", "drift", "nondecision", "start",
      "p_upper", "mean_rt", "log_likelihood", "context", "difficulty", "theta", "beta"], "trials.csv columns")
q = header(r + "/fit_quantiles.csv")
want_q = ["model", "condition", "regressor", "bin", "regressor_low", "regressor_high", "regressor_mean", "boundary",
          "trials", "responses", "observed_share", "predicted_share"]
for p in ("10", "30", "50", "70", "90"):
    want_q += ["observed_q" + p, "predicted_q" + p]
check(q == want_q, "fit_quantiles.csv columns")
fits = json.load(open(r + "/fits.json"))
names = [m["name"] for m in fits["models"]]
check(names == ["baseline", "theta-and-beta"], "fits.json models in study order: %s" % names)
keys = {"name", "log_likelihood", "parameters", "trials", "aic", "bic", "converged", "coefficients"}
check(all(keys <= set(m) for m in fits["models"]), "fits.json model keys")
ckeys = {"parameter", "term", "level", "estimate", "se", "ci_low", "ci_high", "z", "p"}
check(all(ckeys <= set(c) for m in fits["models"] for c in m["coefficients"]), "fits.json coefficient keys")
check(all(m["converged"] for m in fits["models"]), "every model converged")
pv = fits["provenance"]
for k in ["bandlink_version", "study", "inputs", "seed", "threads", "welch", "bands", "trials", "started", "finished",
          "stage_seconds"]:
    check(k in pv, "provenance has %s" % k)
check(pv["seed"] == 7 and pv["threads"] == 2, "provenance: seed 7, threads 2")
roles = [i["role"] for i in pv["inputs"]]
check(roles == ["study", "trials", "recording", "recording", "recording"], "provenance inputs: %s" % roles)
import hashlib
check(all(i["sha256"] == hashlib.sha256(open(i["path"], "rb").read()).hexdigest() for i in pv["inputs"]),
      "provenance SHA-256 of every input matches hashlib")
w = pv["welch"]
check(w["rate"] == 1000 and w["segment_samples"] == 500 and w["overlap_samples"] == 250 and w["window_samples"] == 750,
      "provenance Welch settings: %s" % w)
b = {x["name"]: x for x in pv["bands"]}
check(b["theta"]["frequencies"] == [4, 6, 8, 10] and b["beta"]["frequencies"] == list(range(16, 31, 2)),
      "provenance bins per band: theta %s beta %s" % (b["theta"]["frequencies"], b["beta"]["frequencies"]))
check(pv["trials"]["total"] == 720 and pv["trials"]["kept"] + sum(pv["trials"]["excluded"].values()) == 720,
      "provenance trial counts %s" % pv["trials"])

# Recovery: the strong effect (threshold slope on theta in rich, true 0.35) inside its CI and away from 0; every
# true coefficient within 4 SE of its estimate (a miss there has probability < 1e-4 per coefficient).
truth = json.load(open(s + "/truth.json"))
model = next(m for m in fits["models"] if m["name"] == truth["model"])
est = {(c["parameter"], c["term"], c["level"]): c for c in model["coefficients"]}
strong = est[("threshold", "theta", "rich")]
check(strong["ci_low"] <= 0.35 <= strong["ci_high"] and strong["ci_low"] > 0,
      "threshold slope on theta [rich]: true 0.35 inside [%.3f, %.3f], CI excludes 0" % (strong["ci_low"], strong["ci_high"]))
covered = 0
for t in truth["coefficients"]:
    c = est.get((t["parameter"], t["term"], t["level"]))
    check(c is not None, "fitted model has %s %s [%s]" % (t["parameter"], t["term"], t["level"]))
    if c is None:
        continue
    check(abs(c["estimate"] - t["value"]) <= 4 * c["se"], "%s %s [%s]: true %.3f, estimate %.3f (se %.3f)" % (
        t["parameter"], t["term"], t["level"], t["value"], c["estimate"], c["se"]))
    covered += c["ci_low"] <= t["value"] <= c["ci_high"]
n = len(truth["coefficients"])
check(covered >= n - 1, "95%% CIs cover %d of %d true coefficients (at most one miss allowed)" % (covered, n))
best = min(fits["models"], key=lambda m: m["aic"])
check(best["name"] == "theta-and-beta", "AIC prefers the true model")

# The truth is on the regressor the study measures: true threshold = intercept + slope * theta (power.csv).
if truth["regressor_shift_max"] == 0:
    tt = {(x["animal"], x["trial"]): x for x in rows(s + "/truth_trials.csv")}
    worst = 0.0
    for x in rows(r + "/power.csv"):
        if x["theta"] == "NA":
            continue
        ctx = x["context"]
        want = {"rich": 1.5, "lean": 1.2}[ctx] + {"rich": 0.35, "lean": 0.0}[ctx] * float(x["theta"])
        worst = max(worst, abs(float(tt[(x["participant"], x["trial"])]["threshold"]) - want))
    check(worst < 1e-9, "true threshold = intercept + slope x measured theta (max error %.2g)" % worst)
else:
    print("SKIP: keep rules excluded trials; regressor shift %g" % truth["regressor_shift_max"])
sys.exit(0 if ok else 1)
PY

# Same inputs and seed: byte-identical outputs apart from the times.
"$BANDLINK" run "$tmp/study/study.json" --out "$tmp/r2" --threads 2 --seed 7 --quiet || fail "second run"
tally "$py" - "$tmp/r1" "$tmp/r2" <<'PY'
import json, os, re, sys
a, b = sys.argv[1], sys.argv[2]
ok = True
def strip(o):
    if isinstance(o, dict):
        return {k: strip(v) for k, v in o.items() if k not in ("started", "finished", "stage_seconds", "seconds")}
    if isinstance(o, list):
        return [strip(v) for v in o]
    return o
files = sorted(os.path.relpath(os.path.join(d, f), a) for d, _, fs in os.walk(a) for f in fs)
files2 = sorted(os.path.relpath(os.path.join(d, f), b) for d, _, fs in os.walk(b) for f in fs)
if files != files2:
    print("FAIL: the two runs wrote different file sets"); ok = False
for f in files:
    x, y = open(os.path.join(a, f), "rb").read(), open(os.path.join(b, f), "rb").read()
    if f in ("fits.json", "provenance.json"):
        same = strip(json.loads(x)) == strip(json.loads(y))
    elif f == "report.html":
        t = re.compile(rb"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\dZ|\d+(\.\d+)? s\b")
        same = t.sub(b"", x) == t.sub(b"", y)
    else:
        same = x == y
    print(("PASS: " if same else "FAIL: ") + "same seed, identical %s" % f)
    ok = ok and same
sys.exit(0 if ok else 1)
PY

# No clobber without --force (exit 2 naming the folder, nothing touched); --force replaces.
before=$(cd "$tmp/r1" && find . -type f -exec sha256sum {} + | sort)
"$BANDLINK" run "$tmp/study/study.json" --out "$tmp/r1" >"$tmp/o" 2>"$tmp/e"; rc=$?
[ $rc -eq 2 ] && grep -q "the output folder $tmp/r1 already exists; use --force" "$tmp/e" \
    && pass "existing results: exit 2 naming the folder" || fail "no-clobber: rc $rc $(cat "$tmp/e")"
after=$(cd "$tmp/r1" && find . -type f -exec sha256sum {} + | sort)
[ "$before" = "$after" ] && pass "refused run left the results untouched" || fail "results changed"
"$BANDLINK" run "$tmp/study/study.json" --out "$tmp/r1" --force --seed 8 --quiet >"$tmp/o" 2>&1; rc=$?
[ $rc -eq 0 ] && [ ! -s "$tmp/o" ] && pass "--force --quiet: exit 0, nothing printed" || fail "--force: rc $rc $(cat "$tmp/o")"
grep -Eq '"seed":[[:space:]]*8,' "$tmp/r1/fits.json" && pass "--force replaced the results" || fail "--force did not replace"

# Default output folder: the study's "output" beside the study file.
"$BANDLINK" run "$tmp/study/study.json" --quiet --timings >"$tmp/o" 2>&1 && [ -s "$tmp/study/results/fits.json" ] \
    && grep -q "^Wall time per step" "$tmp/o" && pass "default output folder study/results; --timings with --quiet" \
    || fail "default output: $(cat "$tmp/o")"

# Progress on stderr only when it is a terminal (util-linux `script` provides one), never with --quiet.
grep -q "\[fits\]" "$tmp/err1" && fail "progress printed to a non-terminal stderr" || pass "no progress when stderr is not a terminal"
if command -v script >/dev/null; then
    script -qec "\"$BANDLINK\" run \"$tmp/study/study.json\" --out \"$tmp/r3\"" /dev/null >"$tmp/tty" 2>&1
    grep -q "\[fits\]" "$tmp/tty" && grep -q "\[power\]" "$tmp/tty" && pass "progress shown on a terminal (stage names)" \
        || fail "no progress on a terminal"
    script -qec "\"$BANDLINK\" run \"$tmp/study/study.json\" --out \"$tmp/r4\" --quiet" /dev/null >"$tmp/tty" 2>&1
    [ ! -s "$tmp/tty" ] && pass "--quiet on a terminal: silent" || fail "--quiet printed: $(head -c 300 "$tmp/tty")"
else
    echo "SKIP: no 'script' command to provide a terminal"
fi

# --force never replaces a folder holding the inputs; a trailing slash names the same folder.
"$BANDLINK" run "$tmp/study/study.json" --out "$tmp/study" --force 2>"$tmp/e"; rc=$?
[ $rc -eq 2 ] && grep -q "holds an input" "$tmp/e" && [ -s "$tmp/study/trials.csv" ] \
    && pass "--out at the study folder with --force: refused, inputs kept" || fail "inputs guard: rc $rc $(cat "$tmp/e")"
"$BANDLINK" run "$tmp/study/study.json" --out "$tmp/r1/" 2>"$tmp/e"; rc=$?
[ $rc -eq 2 ] && grep -q "already exists" "$tmp/e" && pass "trailing slash: same folder, no clobber" || fail "trailing slash: rc $rc"

# Usage errors.
"$BANDLINK" run 2>"$tmp/e"; [ $? -eq 2 ] && grep -q "missing the study file" "$tmp/e" && pass "no study: exit 2" || fail "no study"
"$BANDLINK" run "$tmp/study/study.json" --threads 0 2>"$tmp/e"; [ $? -eq 2 ] && pass "--threads 0: exit 2" || fail "--threads 0"
"$BANDLINK" run "$tmp/nope.json" --out "$tmp/r9" 2>"$tmp/e"; rc=$?
[ $rc -eq 2 ] && grep -q "nope.json" "$tmp/e" && [ ! -e "$tmp/r9" ] && pass "missing study: exit 2 naming it, nothing created" \
    || fail "missing study: rc $rc $(cat "$tmp/e")"

"$BANDLINK" run "$tmp" --out "$tmp/r10" 2>"$tmp/e"; rc=$?
[ $rc -eq 2 ] && grep -q "it is a folder" "$tmp/e" && pass "a folder given as the study file: exit 2" || fail "folder as study: rc $rc"

# --force replaces only a folder bandlink wrote: a folder of someone's own files survives untouched.
mkdir -p "$tmp/own" && echo "draft" >"$tmp/own/thesis.txt"
"$BANDLINK" run "$tmp/study/study.json" --out "$tmp/own" --force --quiet 2>"$tmp/e"; rc=$?
[ $rc -eq 2 ] && grep -q "not replaced even with --force" "$tmp/e" && [ "$(ls "$tmp/own")" = "thesis.txt" ] &&
    pass "--force refuses a folder bandlink did not write (exit 2, its file kept)" || fail "--force on a foreign folder: rc $rc"

finish
