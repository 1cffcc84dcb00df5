#!/usr/bin/env bash
# bandlink predict: JSON keys and values per docs/cli.md and the vocabulary, table output, and
# exit code 2 with a message naming the option/parameter and value for bad input.
# Value checks: P(upper) at threshold 1, drift 1, start 0.5 is the logistic 1/(1+e^-1) (EZ-diffusion,
# Wagenmakers, van der Maas & Grasman 2007); mean decision time there is (a/(2v)) tanh(va/2)
# = 0.2310585786300049 (same source).
set -u
. "$(dirname "$0")/lib.sh"
: "${BANDLINK:?}"
PY=python3
[ -x /usr/bin/python3 ] && PY=/usr/bin/python3

out=$("$BANDLINK" predict --threshold 1 --drift 1 --nondecision 0.3 --rt 0.5,0.35,1.2,0.2 --json) && pass "predict --json exits 0" || fail "predict --json exits 0"
echo "$out" | "$PY" -c '
import json, math, sys
d = json.load(sys.stdin)
keys = {"p_upper", "p_lower", "mean_rt_upper", "mean_rt_lower", "quantiles", "density"}
assert keys <= set(d), "missing keys: %s" % (keys - set(d))
assert abs(d["p_upper"] - 1 / (1 + math.exp(-1))) < 1e-14, d["p_upper"]
assert abs(d["p_upper"] + d["p_lower"] - 1) < 1e-15
mdt = 0.5 * math.tanh(0.5)
assert abs(d["mean_rt_upper"] - (0.3 + mdt)) < 1e-13, d["mean_rt_upper"]
assert abs(d["mean_rt_lower"] - (0.3 + mdt)) < 1e-13
q = d["quantiles"]
assert q["probabilities"] == [0.1, 0.3, 0.5, 0.7, 0.9]
for b in ("upper", "lower"):
    assert len(q[b]) == 5 and all(0.3 < x for x in q[b]) and q[b] == sorted(q[b]), q[b]
# w = 1/2: both boundaries have the same RT distribution shape
assert all(abs(a - b) < 1e-9 for a, b in zip(q["upper"], q["lower"]))
assert [e["rt"] for e in d["density"]] == [0.5, 0.35, 1.2, 0.2], "density order"
for e in d["density"]:
    assert set(e) == {"rt", "upper", "lower"}
    if e["rt"] <= 0.3:
        assert e["upper"] == 0 and e["lower"] == 0
    else:
        # at w = 1/2: f_up / f_lo = exp(v a) (Navarro & Fuss 2009 mirror rule)
        assert abs(e["upper"] / e["lower"] - math.e) < 1e-12
' && pass "JSON keys, order and values" || fail "JSON keys, order and values"

# numerics notes 6.1: ln f_lo(0.35 | v=1, a=1, w=.5) = -1.2574538785445 (mpmath, 40 digits)
"$BANDLINK" predict --threshold 1 --drift 1 --nondecision 0 --rt 0.35 --json | "$PY" -c '
import json, math, sys
d = json.load(sys.stdin)
assert abs(math.log(d["density"][0]["lower"]) + 1.2574538785445) < 1e-12
assert abs(math.log(d["density"][0]["upper"]) + 0.25745387854453) < 1e-12
' && pass "density matches the mpmath reference value" || fail "density matches the mpmath reference value"

# variability options and contamination are accepted and change the answer
a=$("$BANDLINK" predict --threshold 1.2 --drift 1 --nondecision 0.3 --start 0.45 --drift-sd 0.8 --start-range 0.2 \
    --nondecision-range 0.1 --contamination 0.02 --contamination-range 0.2,3 --rt 0.6 --json) \
    && pass "all variability options run" || fail "all variability options run"
echo "$a" | "$PY" -c '
import json, sys
d = json.load(sys.stdin)
assert 0 < d["p_upper"] < 1 and d["density"][0]["upper"] > 0
' && pass "variability output is sane" || fail "variability output is sane"

# human-readable table
t=$("$BANDLINK" predict --threshold 1 --drift 1 --nondecision 0.3 --rt 0.5)
echo "$t" | grep -q "^boundary *probability" && echo "$t" | grep -q "^upper " && echo "$t" | grep -q "^0.5 " \
    && pass "table output" || fail "table output: $t"

# bad input: exit 2, message names the option or parameter and the value
expect2() {
    local want="$1"; shift
    local err code
    err=$("$BANDLINK" predict "$@" 2>&1 >/dev/null); code=$?
    if [ "$code" -eq 2 ] && echo "$err" | grep -q -- "$want"; then pass "exit 2 naming '$want' for: $*"
    else fail "expected exit 2 naming '$want' for: $* (got $code: $err)"; fi
}
expect2 "--drift: 'abc'" --threshold 1 --drift abc --nondecision 0.3
expect2 "threshold must be > 0 (got -1)" --threshold -1 --drift 1 --nondecision 0.3
expect2 "start must lie in (0, 1) (got 1.5)" --threshold 1 --drift 1 --nondecision 0.3 --start 1.5
expect2 "drift_sd must be >= 0 (got -0.5)" --threshold 1 --drift 1 --nondecision 0.3 --drift-sd -0.5
expect2 "nondecision_range" --threshold 1 --drift 1 --nondecision 0.1 --nondecision-range 0.5
expect2 "start_range" --threshold 1 --drift 1 --nondecision 0.1 --start 0.2 --start-range 0.6
expect2 "--rt: 'x'" --threshold 1 --drift 1 --nondecision 0.3 --rt 0.5,x
expect2 "--rt: '-1'" --threshold 1 --drift 1 --nondecision 0.3 --rt -1
expect2 "--nondecision is required" --threshold 1 --drift 1
expect2 "unknown option '--bogus'" --threshold 1 --drift 1 --nondecision 0.3 --bogus
expect2 "--contamination-range" --threshold 1 --drift 1 --nondecision 0.3 --contamination 0.1
expect2 "--drift given twice" --threshold 1 --drift 1 --drift 2 --nondecision 0.3
expect2 "--threshold: 'inf'" --threshold inf --drift 1 --nondecision 0.3

# the documented examples run (docs/cli.md, predict section)
if [ -n "${BL_SOURCE_ROOT:-}" ]; then
    n=0
    while IFS= read -r line; do
        n=$((n + 1))
        # shellcheck disable=SC2086
        if "$BANDLINK" ${line#\$ bandlink } >/dev/null; then pass "docs example: $line"; else fail "docs example: $line"; fi
    done < <(sed -n '/<!-- section: predict/,/<!-- end section: predict/p' "$BL_SOURCE_ROOT/docs/cli.md" | grep '^\$ bandlink predict')
    [ "$n" -ge 1 ] && pass "docs/cli.md has $n predict examples" || fail "no predict example in docs/cli.md"
fi

"$BANDLINK" predict --help | grep -q -- "--nondecision-range" && pass "--help lists the options" || fail "--help"

finish
