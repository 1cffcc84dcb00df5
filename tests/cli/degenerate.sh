#!/usr/bin/env bash
# Degenerate data with a defined outcome (docs/degenerate-data.md): a clear error (exit 2 naming the
# culprit) or a warning, never a crash and never NaN/Inf in an output file.
# Data: a small study made by `bandlink simulate`, then altered per case with awk and, for recordings,
# python3-soundfile (libsndfile) — the recording cases are skipped without it.
set -u
. "$(dirname "$0")/lib.sh"
: "${BANDLINK:?}" "${BL_SOURCE_ROOT:?}"
B="$BANDLINK"
PY=/usr/bin/python3
work=$tmp
cd "$work"

"$B" simulate "$BL_SOURCE_ROOT/tests/cli/simulate_small.json" --out base --quiet || bail "simulate base study"

# clean_outputs DIR: every CSV field finite or NA; every JSON file strict JSON (no NaN/Infinity tokens).
clean_outputs() {
    local dir="$1" name="$2"
    local hits
    hits=$(grep -HEio '(^|,)"?(-?nan|-?inf|-?infinity)"?(,|$)' "$dir"/*.csv 2>/dev/null | head -3)
    [ -z "$hits" ] && pass "$name: no NaN/Inf in CSV outputs" || fail "$name: NaN/Inf in outputs: $hits"
    if [ -x "$PY" ]; then
        for j in "$dir"/*.json; do
            [ -f "$j" ] || continue
            # Python's json module with parse_constant raising: NaN/Infinity are not JSON (RFC 8259).
            if "$PY" -c 'import json,sys; json.load(open(sys.argv[1]), parse_constant=lambda c: (_ for _ in ()).throw(ValueError(c)))' "$j" 2>/dev/null; then
                pass "$name: $(basename "$j") is strict JSON (RFC 8259, python json)"
            else
                fail "$name: $(basename "$j") is not strict JSON"
            fi
        done
    fi
}

# run_case NAME WANT-EXIT GREP-PATTERN(stderr, extended regex) COMMAND...
run_case() {
    local name="$1" want="$2" pattern="$3"
    shift 3
    "$@" >"$work/out.txt" 2>"$work/err.txt"
    local rc=$?
    [ "$rc" -eq "$want" ] && pass "$name: exit $rc" || fail "$name: exit $rc, want $want: $(head -c 300 "$work/err.txt")"
    if [ -z "$pattern" ]; then
        :
    elif grep -Eq "$pattern" "$work/err.txt"; then
        pass "$name: says '$(grep -Em1 "$pattern" "$work/err.txt" | cut -c1-140)'"
    else
        fail "$name: stderr lacks /$pattern/: $(head -c 300 "$work/err.txt")"
    fi
}

copy_with_trials() { # NAME AWK-PROGRAM
    rm -rf "$1"
    cp -r base "$1"
    awk -F, -v OFS=, "$2" base/trials.csv >"$1/trials.csv"
}

# 1. Every response in a cell at one boundary: the cell's drift is informed by RTs alone -> warning.
copy_with_trials one_boundary 'NR > 1 && $4 == "easy" { $8 = 1 } { print }'
run_case "all responses at the upper boundary in cell easy" 0 "warning: .*all .* upper boundary" "$B" fit one_boundary/study.json --out one_boundary/out
clean_outputs one_boundary/out "one boundary"

# 2. A level with fewer trials than its parameters (one lean trial, intercept + theta slope).
copy_with_trials few_trials 'NR == 1 || $5 != "lean" || (++k <= 1)'
run_case "one trial for two parameters" 2 "model 'theta-and-beta'.*parameter 'threshold'.*'lean'" "$B" fit few_trials/study.json --out few_trials/out

# 3. Identical RTs: the likelihood is unbounded (threshold -> 0), so this is an error, not a fit.
copy_with_trials identical 'NR > 1 { $9 = 0.5 } { print }'
run_case "identical RTs" 2 "identical" "$B" fit identical/study.json --out identical/out
[ ! -e identical/out/fits.json ] && pass "identical RTs: no fits.json written" || fail "identical RTs: fits.json written"

# 3b. A fixed nondecision time above the RTs: the likelihood is zero at the start; the message names the
#     first trial that makes it so, its RT and the value.
rm -rf fixed && cp -r base fixed
sed -i 's/"models":\t\[{/"models":\t[{\n\t\t\t"nondecision": {"fixed": 5},/' fixed/study.json
run_case "fixed nondecision above every RT" 2 "trial table row [0-9]+: an RT of .* nondecision 5 s" "$B" fit fixed/study.json --out fixed/out

# 4. RTs below any plausible nondecision time and no rt_min rule: warning, and no NaN.
copy_with_trials fast 'NR > 1 && NR % 10 == 0 { $9 = 0.02 } { print }'
sed -i 's/"rt_min":[^,]*,//' fast/study.json
run_case "RTs below 0.1 s without rt_min" 0 "warning: .*(faster than|below) 0.1 s" "$B" fit fast/study.json --out fast/out
clean_outputs fast/out "fast RTs"

# 5. A regressor constant within a participant: fine pooled, an error naming the participant when separate.
copy_with_trials constant 'NR == 1 { print $0 ",pupil"; next } { print $0 "," ($1 == "a1" ? 1.5 : 0.7 + 0.01 * NR) }'
if [ -x "$PY" ]; then
    "$PY" - <<'PYEOF'
import json
s = json.load(open('constant/study.json'))
s['models'].append({"name": "pupil-threshold", "extends": "baseline",
                    "threshold": {"per": ["context"], "slopes": {"pupil": []}}})
json.dump(s, open('constant/study.json', 'w'), indent=1)
s['fit'] = {"participants": "separate"}
json.dump(s, open('constant/separate.json', 'w'), indent=1)
PYEOF
    run_case "regressor constant within a participant, pooled" 0 "" "$B" fit constant/study.json --out constant/out --quiet
    clean_outputs constant/out "constant regressor pooled"
    run_case "regressor constant within participant a1, separate" 2 "participant 'a1'.*'pupil'" "$B" fit constant/separate.json --out constant/out2
fi

# 6. One participant in separate mode: group summary without a between-participant test, no NaN.
copy_with_trials single 'NR == 1 || $1 == "a1"'
sed -i 's/"output":/"fit": {"participants": "separate"},\n\t"output":/' single/study.json
run_case "one participant, separate" 0 "warning: .*one participant" "$B" fit single/study.json --out single/out
clean_outputs single/out "one participant"

if [ -x "$PY" ] && "$PY" -c 'import soundfile, numpy' 2>/dev/null; then
    # 7. A band with zero power (a silent recording: log10 of 0): the trials are excluded with a reason.
    rm -rf silent && cp -r base silent
    "$PY" -c 'import soundfile as sf; x, fs = sf.read("silent/recordings/a1.flac"); x[:] = 0; sf.write("silent/recordings/a1.flac", x, fs, subtype="PCM_24")'
    run_case "silent recording" 0 "warning: .*(zero|flat|excluded|left out)" "$B" run silent/study.json --out silent/out
    n=$(grep -c 'zero band power\|artifact: flat' silent/out/power.csv)
    [ "$n" -eq 240 ] && pass "silent recording: all 240 trials of a1 excluded with a reason" || fail "silent recording: $n trials flagged"
    clean_outputs silent/out "silent recording"

    # 8. NaN and Inf samples (float WAV): the windows holding them are flagged "artifact: non-finite".
    rm -rf nonfinite && cp -r base nonfinite
    "$PY" - <<'PYEOF'
import json, numpy as np, soundfile as sf
for a in ['a1', 'a2', 'a3']:
    x, fs = sf.read(f'nonfinite/recordings/{a}.flac')
    if a == 'a2':
        x[::997, 0] = np.nan
        x[::1999, 1] = np.inf
    sf.write(f'nonfinite/recordings/{a}.wav', x, fs, subtype='FLOAT')
s = json.load(open('nonfinite/study.json'))
s['recordings']['file'] = 'recordings/{animal}.wav'
json.dump(s, open('nonfinite/study.json', 'w'))
PYEOF
    run_case "NaN/Inf samples" 0 "warning: .*artifact" "$B" run nonfinite/study.json --out nonfinite/out
    n=$(grep -c 'artifact: non-finite' nonfinite/out/power.csv)
    [ "$n" -gt 0 ] && pass "NaN/Inf samples: $n trials flagged 'artifact: non-finite'" || fail "NaN/Inf samples: nothing flagged"
    clean_outputs nonfinite/out "non-finite samples"
else
    echo "recording cases skipped: python3-soundfile (libsndfile) or numpy missing"
fi

finish
