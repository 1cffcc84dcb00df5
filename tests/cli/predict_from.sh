#!/usr/bin/env bash
# bandlink predict --from fits.json: predictions of fitted models checked against independent
# recomputations from the fits.json written by `bandlink fit`:
#  (a) each predicted parameter = inverse link of intercept + slope * x from the coefficients (python3 json);
#  (b) delta-method SEs from the "covariance" matrix (python3-numpy): parameters, and P(upper) through the
#      closed form P = 1 / (1 + exp(-v a)) at start 1/2 (Wagenmakers, van der Maas & Grasman 2007, EZ
#      equations with s = 1) with its analytic gradient dP/da = v P(1-P), dP/dv = a P(1-P);
#  (c) P(upper) equals the raw `bandlink predict` at the same parameter values;
#  (d) every bad input exits 2 with a one-line message naming the culprit.
# Data: invented trials drawn with the engine's sampler (tests/fit_make_trials.c).
# Exit 77 (skipped) without python3; the numpy checks are skipped without numpy (exit 77 at the end
# when everything else passed).
set -u
: "${BANDLINK:?}" "${BL_BUILD_ROOT:?}"
PY=python3
[ -x /usr/bin/python3 ] && PY=/usr/bin/python3
command -v "$PY" >/dev/null || { echo "SKIP: python3 missing"; exit 77; }
have_numpy=1
"$PY" -c 'import numpy' 2>/dev/null || { have_numpy=0; echo "SKIP: numpy missing, the delta-method checks are skipped"; }
fails=0
passes=0
pass() { passes=$((passes + 1)); echo "PASS: $1"; }
fail() { fails=$((fails + 1)); echo "FAIL: $1"; }

tmp=$(mktemp -d /tmp/bl_predict_from_XXXXXX)
trap 'rm -rf "$tmp"' EXIT
cd "$tmp" || exit 1
"$BL_BUILD_ROOT/tests/fit_make_trials" trials.csv 250 3 11 || { echo "FAIL: make trials"; exit 1; }
"$BL_BUILD_ROOT/tests/fit_make_trials" stim.csv 250 3 12 stimulus || { echo "FAIL: make trials"; exit 1; }

cat > study.json <<'EOF'
{
  "trials": {"file": "trials.csv", "participant": "animal", "rt": "rt", "response": "correct", "upper": ["1"],
             "keep": {"rt_min": 0.15, "rt_max": 5.0}},
  "fit": {"participants": "pooled", "starts": 2},
  "models": [
    {"name": "baseline", "threshold": {"per": ["context"]}, "drift": {"per": ["difficulty"]}},
    {"name": "theta-threshold", "extends": "baseline",
     "threshold": {"per": ["context"], "slopes": {"theta": ["context"]}}},
    {"name": "log-links", "threshold": {"per": ["context"], "slopes": {"theta": []}, "link": "log"},
     "drift": {"per": ["difficulty"], "slopes": {"beta": []}, "link": "log"}}
  ],
  "output": "pooled"
}
EOF
sed 's/"pooled", "starts"/"separate", "starts"/; s/"output": "pooled"/"output": "separate"/' study.json > separate.json
cat > stimulus.json <<'EOF'
{
  "trials": {"file": "stim.csv", "participant": "animal", "rt": "rt", "response": "choice", "upper": ["high"],
             "stimulus": "tone", "keep": {"rt_min": 0.15, "rt_max": 5.0}},
  "fit": {"participants": "pooled", "starts": 2},
  "models": [{"name": "drift-beta", "drift": {"per": ["difficulty"], "slopes": {"beta": []}}}],
  "output": "stimulus"
}
EOF
for s in study separate stimulus; do
    "$BANDLINK" fit $s.json --quiet || { echo "FAIL: fit $s.json"; exit 1; }
done

# --- (a), (b), (c) on the pooled fit --------------------------------------------------------------
# recompute MODEL FITS OUT.json KEY=VAL...: checks the prediction in OUT.json against fits.json.
recompute() {
    "$PY" - "$@" <<'PY'
import json, math, sys
model, fits, out = sys.argv[1:4]
at = dict(kv.split("=", 1) for kv in sys.argv[4:])
participant = at.pop("@participant", None)
d = json.load(open(fits))
pred = json.load(open(out))
m = [m for m in d["models"] if m["name"] == model][0]
spec = [s for s in d["provenance"]["study"]["models"] if s["name"] == model][0]
fit = m if participant is None else [p for p in m["participants"] if p["participant"] == participant][0]
coefs = fit["coefficients"]
def index(param, term, level):
    hits = [j for j, c in enumerate(coefs) if (c["parameter"], c["term"], c["level"]) == (param, term, level)]
    assert len(hits) == 1, (param, term, level)
    return hits[0]
try:
    import numpy as np
except ImportError:
    np = None
bad = 0
for name, p in pred["parameters"].items():
    ps = spec[name]
    if "fixed" in ps:
        ok = p["value"] == ps["fixed"] and p["link"] == "fixed"
        print(("PASS" if ok else "FAIL") + ": (a) %s fixed at %g" % (name, ps["fixed"]))
        bad += not ok
        continue
    g = [0.0] * len(coefs)
    g[index(name, "intercept", ":".join(at[c] for c in ps["per"]))] = 1.0
    for reg, by in ps["slopes"].items():
        g[index(name, reg, ":".join(at[c] for c in by))] += float(at[reg])
    eta = sum(gi * c["estimate"] for gi, c in zip(g, coefs))
    log = ps.get("link") == "log"
    want = math.exp(eta) if log else eta
    ok = abs(p["value"] - want) <= 1e-12 * max(1, abs(want)) and p["link"] == ("log" if log else "identity")
    print(("PASS" if ok else "FAIL") + ": (a) %s = %s(eta) = %.15g (got %.15g)" % (name, "exp" if log else "identity", want, p["value"]))
    bad += not ok
    if np is not None:
        S = np.array(fit["covariance"], dtype=float)
        gv = np.array(g)
        se = (want if log else 1.0) * math.sqrt(gv @ S @ gv)
        hi = math.exp(eta + 1.959963984540054 * math.sqrt(gv @ S @ gv)) if log else want + 1.959963984540054 * se
        ok = abs(p["se"] - se) <= 1e-10 * se and abs(p["ci_high"] - hi) <= 1e-10 * max(1, abs(hi))
        print(("PASS" if ok else "FAIL") + ": (b) %s se = %s sqrt(g'Sg) = %.12g (got %.12g, numpy)" % (name, "exp(eta)" if log else "1 *", se, p["se"]))
        bad += not ok
sys.exit(1 if bad else 0)
PY
}

check_model() { # label, model, fits, key=value...
    local label=$1 model=$2 fits=$3
    shift 3
    local at="" part="" kv
    for kv in "$@"; do
        case "$kv" in @participant=*) part=${kv#@participant=} ;; *) at="$at${at:+,}$kv" ;; esac
    done
    if "$BANDLINK" predict --from "$fits" --model "$model" --at "$at" ${part:+--participant "$part"} --json > "$label.json"; then
        pass "$label: predict --from exits 0"
    else
        fail "$label: predict --from exits 0"
        return
    fi
    local out
    out=$(recompute "$model" "$fits" "$label.json" "$@")
    local code=$?
    echo "$out" | sed "s/^\(PASS\|FAIL\): /\1: $label: /"
    passes=$((passes + $(echo "$out" | grep -c '^PASS')))
    fails=$((fails + $(echo "$out" | grep -c '^FAIL')))
    [ $code -eq 0 ] || [ "$(echo "$out" | grep -c '^FAIL')" -gt 0 ] || fail "$label: recomputation failed"
}

check_model identity-rich theta-threshold pooled/fits.json theta=1.5 context=rich difficulty=easy
check_model identity-lean theta-threshold pooled/fits.json theta=-0.7 context=lean difficulty=hard
check_model log-links log-links pooled/fits.json theta=0.9 beta=-1.2 context=rich difficulty=medium
check_model participant theta-threshold separate/fits.json theta=1.2 context=rich difficulty=medium @participant=rat2

# (b) P(upper) through its closed form at start 1/2, and the mean RT t0 + a/(2v) tanh(va/2) (same source).
if [ $have_numpy -eq 1 ]; then
    if "$PY" - <<'PY'
import json, math, numpy as np
d = json.load(open("pooled/fits.json"))
m = [m for m in d["models"] if m["name"] == "theta-threshold"][0]
pred = json.load(open("identity-rich.json"))
coefs = m["coefficients"]
S = np.array(m["covariance"])
def idx(p, t, l):
    return [j for j, c in enumerate(coefs) if (c["parameter"], c["term"], c["level"]) == (p, t, l)][0]
a = pred["parameters"]["threshold"]["value"]
v = pred["parameters"]["drift"]["value"]
P = 1 / (1 + math.exp(-v * a))
J = np.zeros(len(coefs))
J[idx("threshold", "intercept", "rich")] = v * P * (1 - P)
J[idx("threshold", "theta", "rich")] = v * P * (1 - P) * 1.5
J[idx("drift", "intercept", "easy")] = a * P * (1 - P)
se = math.sqrt(J @ S @ J)
got = pred["p_upper"]
assert abs(got["value"] - P) < 1e-13, (got["value"], P)
assert abs(got["se"] - se) < 1e-6 * se, (got["se"], se)
print("P(upper) %.15g se %.10g (numpy %.10g)" % (got["value"], got["se"], se))
u = v * a / 2
mean = pred["parameters"]["nondecision"]["value"] + a / (2 * v) * math.tanh(u)
assert abs(pred["mean_rt"]["value"] - mean) < 1e-10, (pred["mean_rt"]["value"], mean)
PY
    then pass "(b) P(upper) se against the closed-form gradient (numpy), mean RT closed form"
    else fail "(b) P(upper) se against the closed-form gradient (numpy), mean RT closed form"; fi
fi

# (c) P(upper) equals the raw predict at the same parameter values.
for label in identity-rich log-links participant; do
    read -r a v t < <("$PY" -c "
import json; p = json.load(open('$label.json'))['parameters']
print(*('%.17g' % p[k]['value'] for k in ('threshold', 'drift', 'nondecision')))")
    raw=$("$BANDLINK" predict --threshold "$a" --drift "$v" --nondecision "$t" --json)
    if "$PY" -c "
import json, sys
f = json.load(open('$label.json')); r = json.loads(sys.argv[1])
assert f['p_upper']['value'] == r['p_upper'] and f['p_lower']['value'] == r['p_lower']
assert f['mean_rt_upper']['value'] == r['mean_rt_upper']
assert f['quantiles']['upper'] == r['quantiles']['upper']
" "$raw"; then pass "(c) $label: P(upper), mean RT, quantiles equal the raw predict"
    else fail "(c) $label: P(upper) equals the raw predict ($raw)"; fi
done

# Stimulus coding: a stimulus of the lower category flips the drift and P(upper).
"$BANDLINK" predict --from stimulus/fits.json --model drift-beta --at difficulty=easy,beta=0.5,tone=high --json > hi.json &&
"$BANDLINK" predict --from stimulus/fits.json --model drift-beta --at difficulty=easy,beta=0.5,tone=low --json > lo.json &&
"$PY" -c "
import json
h = json.load(open('hi.json')); l = json.load(open('lo.json'))
assert h['parameters']['drift']['value'] > 0 and l['parameters']['drift']['value'] == -h['parameters']['drift']['value']
assert abs(h['p_upper']['value'] - l['p_lower']['value']) < 1e-15
" && pass "stimulus coding: tone=low flips the drift and swaps P(upper)/P(lower)" || fail "stimulus coding"

# Table output and the group summary of a separate fit (no covariance: no intervals).
t=$("$BANDLINK" predict --from pooled/fits.json --model theta-threshold --at theta=1,context=rich,difficulty=easy)
echo "$t" | grep -q '^threshold .*identity$' && echo "$t" | grep -q '^upper ' && echo "$t" | grep -q 'delta method' \
    && pass "table output" || fail "table output: $t"
t=$("$BANDLINK" predict --from separate/fits.json --model theta-threshold --at theta=1,context=rich,difficulty=easy --json)
echo "$t" | "$PY" -c "
import json, sys; d = json.load(sys.stdin)
assert d['participant'] is None and d['parameters']['threshold']['se'] is None and d['p_upper']['se'] is None
" && pass "separate fit without --participant: group coefficients, intervals null" || fail "group summary: $t"
w=$("$BANDLINK" predict --from pooled/fits.json --model baseline --at theta=1,context=rich,difficulty=easy 2>&1 >/dev/null)
echo "$w" | grep -q "does not use 'theta'" && pass "a name only other models use: warning" || fail "unused name warning: $w"

# --- (d) bad input: exit 2 and a one-line message naming the culprit ---------------------------
expect2() {
    local want="$1"; shift
    local err code
    err=$("$BANDLINK" predict "$@" 2>&1 >/dev/null); code=$?
    if [ "$code" -eq 2 ] && echo "$err" | grep -qF -- "$want" && [ "$(echo "$err" | wc -l)" -eq 1 ]; then
        pass "(d) exit 2 naming '$want'"
    else
        fail "(d) expected exit 2 and one line naming '$want' for: $* (got $code: $err)"
    fi
}
AT=theta=1,context=rich,difficulty=easy
expect2 "nothere.json: cannot open" --from nothere.json --model baseline --at $AT
printf '{"models": [\n  {"name": "x",}\n]}\n' > syntax.json
expect2 "syntax.json:2:" --from syntax.json --model x
"$PY" -c "
import json; d = json.load(open('pooled/fits.json')); del d['models'][1]['coefficients']
json.dump(d, open('nocoef.json', 'w'))"
expect2 "nocoef.json: key 'models[1].coefficients' is missing" --from nocoef.json --model theta-threshold --at $AT
"$PY" -c "
import json; d = json.load(open('pooled/fits.json')); d['models'][1]['covariance'][2] = [1]
json.dump(d, open('badcov.json', 'w'))"
expect2 "badcov.json: key 'models[1].covariance[2]'" --from badcov.json --model theta-threshold --at $AT
"$PY" -c "
import json; d = json.load(open('pooled/fits.json')); del d['provenance']
json.dump(d, open('noprov.json', 'w'))"
expect2 "noprov.json: key 'provenance.study'" --from noprov.json --model theta-threshold --at $AT
expect2 "no model 'nosuch' in pooled/fits.json (models: baseline, theta-threshold, log-links)" \
    --from pooled/fits.json --model nosuch --at $AT
expect2 "unknown name 'thetaa' (model 'theta-threshold' uses: context, theta (regressor), difficulty)" \
    --from pooled/fits.json --model theta-threshold --at thetaa=1,context=rich,difficulty=easy
expect2 "context = 'rch' (levels in the fit: rich, lean)" \
    --from pooled/fits.json --model theta-threshold --at theta=1,context=rch,difficulty=easy
expect2 "difficulty = 'easyy' (levels in the fit: easy, hard, medium)" \
    --from pooled/fits.json --model theta-threshold --at theta=1,context=rich,difficulty=easyy
expect2 "uses regressor 'theta' (in threshold) but no value is given" \
    --from pooled/fits.json --model theta-threshold --at context=rich,difficulty=easy
expect2 "uses condition column 'difficulty' (in drift) but no value is given" \
    --from pooled/fits.json --model theta-threshold --at theta=1,context=rich
expect2 "regressor 'theta': 'high' is not a finite number" \
    --from pooled/fits.json --model theta-threshold --at theta=high,context=rich,difficulty=easy
expect2 "participant 'rat9' is not in the fit of model 'theta-threshold' in separate/fits.json (participants: rat1, rat2, rat3)" \
    --from separate/fits.json --model theta-threshold --at $AT --participant rat9
expect2 "model 'theta-threshold' in pooled/fits.json was fitted with participants pooled" \
    --from pooled/fits.json --model theta-threshold --at $AT --participant rat1
expect2 "'theta' is given twice" --from pooled/fits.json --model theta-threshold --at $AT,theta=2
expect2 "option --at: 'theta' in 'theta' is not NAME=VALUE" --from pooled/fits.json --model theta-threshold --at theta
expect2 "option --model is required with --from (models in pooled/fits.json: baseline" --from pooled/fits.json --at $AT
expect2 "option --threshold cannot be used with --from" --from pooled/fits.json --model baseline --threshold 1
expect2 "option --rt cannot be used with --from" --from pooled/fits.json --model baseline --rt 0.5
expect2 "threshold must be > 0" --from pooled/fits.json --model theta-threshold --at theta=-40,context=rich,difficulty=easy

"$BANDLINK" predict --help > help.txt
for opt in --from --model --at --participant --contamination-range --json --threshold --rt; do
    grep -q -- "$opt" help.txt || fail "--help lists $opt"
done
grep -q "standardised units" help.txt && pass "--help lists every option and the regressor scale" || fail "--help: regressor scale"

echo "$passes passed, $fails failed"
[ $fails -eq 0 ] || exit 1
[ $have_numpy -eq 1 ] || exit 77
exit 0
