#!/usr/bin/env bash
# bandlink scan on the small documented example (docs/examples/power): outputs and their shape, the same
# bytes for 1 and 2 threads, and every bad grid: exit 2 and one line naming the key and the value, with
# nothing written.
set -u
fail=0
pass() { echo "PASS: $*"; }
bad() { echo "FAIL: $*"; fail=1; }
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT
ex="$BL_SOURCE_ROOT/docs/examples/power"

GRID='"frequencies": {"from": 4, "to": 30, "count": 5, "spacing": "log", "bandwidth": 4},
      "windows": {"align": "onset", "from": -1.0, "to": 0.5, "length": 0.5, "step": 0.25},
      "parameters": [{"parameter": "threshold", "by": ["context"]}, "drift"],
      "null_model": "baseline", "permutations": 99'
# make_case NAME SCAN_BLOCK_BODY: a study folder with the example's trials and recordings and this scan block
make_case() {
    local d="$tmp/$1"
    mkdir -p "$d"
    ln -s "$ex/recordings" "$d/recordings"
    cp "$ex/trials.csv" "$d/trials.csv"
    /usr/bin/python3 - "$ex/study.json" "$d/study.json" "$2" <<'PY'
import json, sys
s = json.load(open(sys.argv[1]))
if sys.argv[3] != "-":
    s["scan"] = json.loads("{" + sys.argv[3] + "}")
json.dump(s, open(sys.argv[2], "w"), indent=1)
PY
}

make_case ok "$GRID"
if "$BANDLINK" scan "$tmp/ok/study.json" --out "$tmp/ok/r1" --threads 1 --quiet 2>"$tmp/ok/err"; then
    pass "scan runs"
else
    bad "scan failed: $(cat "$tmp/ok/err")"
fi
csv="$tmp/ok/r1/scan.csv"
head -1 "$csv" | grep -qx 'frequency,bandwidth,window_from,window_to,parameter,level,statistic,estimate,z,p,p_familywise,cluster' &&
    pass "scan.csv header" || bad "scan.csv header: $(head -1 "$csv")"
# 5 frequencies x 5 windows x (threshold rich, threshold lean, drift) = 75 rows
rows=$(($(wc -l < "$csv") - 1))
[ "$rows" -eq 75 ] && pass "75 rows (cells x tests)" || bad "$rows rows, wanted 75"
awk -F, 'NR > 1 && ($10 == "NA" || $10 < 0 || $10 > 1 || $11 == "NA" || $11 < 0.01 || $11 > 1 || $4 - $3 != 0.5) { bad = 1 }
         END { exit bad }' "$csv" && pass "p in [0, 1], family-wise p in [1/100, 1], windows 0.5 s long" ||
    bad "values out of range in scan.csv"
awk -F, 'NR > 1 && $11 + 1e-12 < $10 && $11 > 0.011 { bad = 1 } END { exit bad }' "$csv" &&
    pass "family-wise p >= uncorrected p" || bad "family-wise p below uncorrected p"
for f in scan_threshold_rich.svg scan_threshold_lean.svg scan_drift.svg power.csv provenance.json; do
    [ -s "$tmp/ok/r1/$f" ] && pass "$f written" || bad "$f missing"
done
grep -q '"scan"' "$tmp/ok/r1/provenance.json" && pass "provenance records the scan block" || bad "no scan block in the provenance"
# The scan's page: the caution, the summary, every heat map inline, the significant cells as a table whose rows
# are exactly the cells of scan.csv with family-wise p <= 0.05.
page="$tmp/ok/r1/scan_report.html"
[ -s "$page" ] && grep -q 'not a medical device' "$page" && [ "$(grep -c '<svg' "$page")" -eq 3 ] \
    && pass "scan_report.html: caution and the 3 heat maps inline" || bad "scan_report.html missing or incomplete"
n_sig=$(awk -F, 'NR > 1 && $11 != "NA" && $11 <= 0.05' "$csv" | wc -l)
n_rows=$(sed -n '/id="significant"/,/<\/table>/p' "$page" | grep -c '<tr><td')
[ "$n_rows" -eq "$(( n_sig < 200 ? n_sig : 200 ))" ] && pass "scan_report.html lists the $n_sig significant cells of scan.csv" \
    || bad "scan_report.html: $n_rows rows, scan.csv has $n_sig significant cells"
"$BANDLINK" scan "$tmp/ok/study.json" --out "$tmp/ok/r2" --threads 2 --quiet 2>/dev/null
cmp -s "$csv" "$tmp/ok/r2/scan.csv" && pass "1 and 2 threads: identical scan.csv" || bad "scan.csv differs between 1 and 2 threads"
"$BANDLINK" scan "$tmp/ok/study.json" --out "$tmp/ok/r3" --seed 9 --quiet 2>/dev/null
cmp -s "$csv" "$tmp/ok/r3/scan.csv" && bad "another seed gives the same family-wise p" || pass "the seed changes the permutations"
out=$("$BANDLINK" scan "$tmp/ok/study.json" --out "$tmp/ok/r4" --permutations 20 2>/dev/null)
echo "$out" | grep -q 'strongest cells' && echo "$out" | grep -q '20 permutations' &&
    pass "summary names the strongest cells; --permutations overrides the block" || bad "summary: $out"

# refits of the strongest cells: a likelihood-ratio test each, in scan_refits.csv and the summary
make_case refit "$GRID"', "refit": 2, "correction": "cluster", "cluster_threshold": 0.2'
out=$("$BANDLINK" scan "$tmp/refit/study.json" --out "$tmp/refit/r" 2>/dev/null)
rf="$tmp/refit/r/scan_refits.csv"
[ "$(wc -l < "$rf" 2>/dev/null)" = 3 ] && pass "scan_refits.csv: 2 refits" || bad "scan_refits.csv: $(cat "$rf" 2>&1)"
awk -F, 'NR > 1 && !($7 >= 0 && $8 == 1 && $9 >= 0 && $9 <= 1) { bad = 1 } END { exit bad }' "$rf" &&
    pass "refits: LR >= 0, df 1, p in [0, 1]" || bad "refits: $(cat "$rf")"
# the refitted cells are the two largest score statistics of scan.csv
top=$(awk -F, 'NR > 1 && $7 != "NA" {print $7}' "$tmp/refit/r/scan.csv" | sort -g -r | head -2 | tr '\n' ' ')
got=$(awk -F, 'NR > 1 {print $6}' "$rf" | tr '\n' ' ')
[ "$top" = "$got" ] && pass "refits are the strongest cells ($got)" || bad "refitted [$got], strongest [$top]"
echo "$out" | grep -q 'cluster-forming threshold p < 0.2' && echo "$out" | grep -q 'likelihood-ratio' &&
    pass "summary states the cluster-forming threshold and the refits" || bad "summary: $out"

# bad grids
n=0
expect() {
    local body=$1; shift
    n=$((n + 1))
    make_case "bad$n" "$body"
    "$BANDLINK" scan "$tmp/bad$n/study.json" --out "$tmp/bad$n/out" >/dev/null 2>"$tmp/bad$n/err"
    local rc=$? ok=1 msg
    msg=$(cat "$tmp/bad$n/err")
    [ $rc -eq 2 ] || ok=0
    [ "$(grep -c 'bandlink: error:' "$tmp/bad$n/err")" -eq 1 ] || ok=0
    for p in "$@"; do grep -qF -- "$p" "$tmp/bad$n/err" || ok=0; done
    [ ! -e "$tmp/bad$n/out" ] || ok=0
    if [ $ok -eq 1 ]; then pass "bad grid $n: $msg"; else bad "bad grid $n exit $rc, wanted [$*]: $msg"; fi
}
sub() { printf '%s' "$GRID" | sed "$1"; }
expect "$(sub 's/"length": 0.5/"length": 45/; s/"to": 0.5/"to": 50/')" 'scan.windows.length' '45' 'longer than the shortest recording'
expect "$(sub 's/"to": 30/"to": 600/')" 'scan.frequencies.to' '600' 'Nyquist'
expect "$(sub 's/"bandwidth": 4/"bandwidth": 1/')" 'scan.frequencies.bandwidth' '(value: 1)' 'resolution'
expect "$(sub 's/"parameter": "threshold"/"parameter": "thresh"/')" 'scan.parameters[0].parameter' '"thresh"'
expect "$(sub 's/"null_model": "baseline"/"null_model": "nope"/')" 'scan.null_model' '"nope"'
expect "$(sub 's/"frequencies"/"freqs"/')" 'unknown or repeated key "scan.freqs"'
expect "$(sub 's/"length": 0.5/"length": 2.5/')" 'scan.windows.length' 'longer than the span'
expect "$(sub 's/"count": 5, //')" 'scan.frequencies' '"step" and "count"'
expect "$(sub 's/"by": \["context"\]/"by": ["ctx"]/')" 'scan.parameters[0].by' 'column "ctx"'
expect "$(sub 's/"drift"/"start"/')" 'scan.parameters[1]' 'start is fixed in the null model'
expect "$(sub 's/"permutations": 99/"permutations": -1/')" 'scan.permutations' '-1'
expect "$(sub 's/"spacing": "log"/"spacing": "octave"/')" 'scan.frequencies.spacing' '"octave"'
expect "$GRID"', "refit": 99' 'scan.refit' '99'
expect "$GRID"', "cluster_threshold": 1.5' 'scan.cluster_threshold' '1.5'
expect - 'no "scan" block'

[ $fail -eq 0 ] && echo "all passed"
exit $fail
