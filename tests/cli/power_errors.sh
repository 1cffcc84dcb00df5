#!/usr/bin/env bash
# Every bad input to bandlink power / check: exit 2 and a one-line message naming the culprit
# (file, line/column or key, and the value). Nothing is written on failure.
set -u
. "$(dirname "$0")/lib.sh"
ex="$BL_SOURCE_ROOT/docs/examples/power"

# expect CMD STUDY_JSON TRIALS_CSV PATTERN...: writes the case into a fresh folder (recordings linked from the example)
n=0
expect() {
    local cmd=$1 json=$2 trials=$3; shift 3
    n=$((n + 1))
    local d="$tmp/case$n"
    mkdir -p "$d"
    ln -s "$ex/recordings" "$d/recordings"
    printf '%s' "$json" > "$d/study.json"
    if [ "$trials" = "-" ]; then cp "$ex/trials.csv" "$d/trials.csv"; else printf "$trials" > "$d/trials.csv"; fi
    if [ "$cmd" = check ]; then "$BANDLINK" check "$d/study.json" >/dev/null 2>"$d/err"
    else "$BANDLINK" power "$d/study.json" --out "$d/out" >/dev/null 2>"$d/err"; fi
    local rc=$?
    local msg; msg=$(cat "$d/err")
    local ok=1
    [ $rc -eq 2 ] || ok=0
    [ "$(grep -c 'bandlink: error:' "$d/err")" -eq 1 ] || ok=0
    for p in "$@"; do grep -qF -- "$p" "$d/err" || ok=0; done
    [ ! -e "$d/out/power.csv" ] || ok=0
    if [ $ok -eq 1 ]; then pass "case $n ($cmd): $msg"; else fail "case $n ($cmd) exit $rc, wanted [$*]: $msg"; fi
}
S=$(cat "$ex/study.json")
sub() { printf '%s' "$S" | sed "$1"; }

expect power "$(sub 's/"slopes"/"slope"/')" - 'unknown key "models[1].threshold.slope"'
expect power "$(sub 's/"window": {/"windw": {/')" - 'unknown key "power.windw"'
expect power "$(sub 's/"from": -1.0, "to": 0.0/"from": 0.5, "to": 0.0/')" - 'power.window.to' '0'
expect power "$(sub 's/"theta": \[4, 10\]/"theta": [10, 4]/')" - 'power.bands.theta' '[10,4]'
expect power "$(sub 's/"beta": \[15, 30\]/"beta": [15, 600]/')" - 'power.bands.beta' 'Nyquist'
expect power "$(sub 's/"unit": "mV"/"unit": "millivolt"/')" - 'recordings.unit' '"millivolt"'
expect power "$(sub 's/"gain": 1000/"gain": "high"/')" - 'recordings.gain' '"high"'
expect power "$(sub 's/"1-2"/"1-9"/')" - 'channel 9' 'r1.flac' 'participant r1'
expect power "$(sub 's/"1-2"/"one"/')" - 'recordings.channels[0]' 'one'
expect power "$(sub 's/{rat}.flac/{animal}.flac/')" - '{animal}' 'recordings.file'
expect power "$(sub 's/{rat}.flac/{rat}.wav/')" - 'r1.wav' 'participant r1'
expect power "$(sub 's/"extends": "baseline"/"extends": "base"/')" - 'models[1].extends' '"base"'
expect power "$(sub 's/"rt_unit": "s"/"rt_unit": "sec"/')" - 'trials.rt_unit' '"sec"'
expect power "$(sub 's/"scale": "log10"/"scale": "ln"/')" - 'power.scale' '"ln"'
expect power "$(sub 's/"participant": "rat"/"participant": "animal"/')" - 'column "animal"' 'trials.participant'
expect power "$(sub 's/"response": "correct"/"response": "choice"/')" - 'column "choice"' 'trials.response'
expect power "$S" 'rat,onset,rt,correct,difficulty,context\nr1,1.0,0.5,1,easy,rich\nr1,2.6,quick,1,easy,rich\n' 'trials.csv:3' '"rt"' "'quick'"
expect power "$S" 'rat,onset,rt,correct,difficulty,context\nr1,1.0,-0.5,1,easy,rich\n' 'trials.csv:2' 'negative'
expect power "$S" 'rat,onset,rt,correct,difficulty,context\n' 'trials.csv' 'empty'
expect power "$S" 'rat,onset,rt,correct,difficulty,context\nr1,1.0,0.5,1,easy\n' 'trials.csv:2' 'expected 6 fields'
expect power "$S" 'rat,onset,rt,correct,difficulty,context\nr1,"1.0,0.5,1,easy,rich\n' 'trials.csv:2:' 'never closed'
expect power "$S" 'rat,onset,rt,correct,difficulty,context\nr1,39.5,0.5,1,easy,rich\nr1,45.0,0.5,1,easy,rich\n' \
    'participant r1' 'trial 2' 'r1.flac' 'outside'
expect power "$S" 'rat,onset,rt,correct,difficulty,context\nr1,0.5,0.5,1,easy,rich\n' 'participant r1' 'trial 1' 'outside'
expect power "$S" 'rat,onset,rt,correct,difficulty,context\nr1,soon,0.5,1,easy,rich\n' 'trials.csv:2' "'soon'"
expect power "$S" 'rat,onset,rt,correct,difficulty,context\nr9,2.0,0.5,1,easy,rich\n' 'participant r9' 'r9.flac'
expect check "$(sub 's/"output"/"outputs"/')" - 'unknown key "outputs"'
expect check "$(printf '{\n  "trials": {"file": "trials.csv",,}\n}')" - 'study.json:2:' 'JSON syntax error'
expect check '{"trials": {"file": "nothere.csv", "participant": "rat", "rt": "rt", "response": "correct", "upper": [1]}}' - 'nothere.csv'
"$BANDLINK" check "$tmp/none.json" 2>"$tmp/err"; rc=$?
[ $rc -eq 2 ] && grep -qF "none.json" "$tmp/err" && pass "missing study file: $(cat "$tmp/err")" || fail "missing study file: $rc $(cat "$tmp/err")"
echo "$n cases"
finish
