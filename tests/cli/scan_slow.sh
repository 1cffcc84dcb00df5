#!/usr/bin/env bash
# Slow suite: a planted effect is found where it was planted. `bandlink simulate` writes a study whose theta
# bursts (5-8 Hz, -0.8 to -0.3 s before each tone) raise the threshold (slope 0.2 per SD of theta power),
# while beta bursts (18-26 Hz, same span) vary as much but change nothing; `bandlink scan` over 4-40 Hz and
# -1.4 to 0.6 s must put its strongest cell on the threshold in the theta band in a window overlapping the
# bursts, family-wise significant, with no family-wise significant cell at or above 15 Hz - under both
# corrections (maximum statistic and cluster mass).
set -u
fail=0
pass() { echo "PASS: $*"; }
bad() { echo "FAIL: $*"; fail=1; }
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT

cat > "$tmp/scenario.json" <<'JSON'
{"name": "planted theta effect", "seed": 31,
 "participants": {"column": "rat", "count": 6, "prefix": "rat"}, "trials_per_participant": 250,
 "conditions": {"context": ["rich", "lean"]},
 "stimulus": {"column": "tone", "levels": ["higher", "lower"], "choice_column": "choice"},
 "timing": {"first_onset": 2.0, "interval": [2.5, 3.0], "tail": 3.0},
 "recording": {"format": "flac", "rate": 500, "contacts": 2, "channels": ["1-2"], "unit": "uV", "full_scale": 5000,
               "background": {"rms": 30}},
 "bursts": {"theta": {"frequency": [5, 8], "from": -0.8, "to": -0.3, "amplitude": 25, "variability": 0.6,
                      "contacts": [1.0, 0.2]},
            "beta": {"frequency": [18, 26], "from": -0.8, "to": -0.3, "amplitude": 20, "variability": 0.6,
                     "contacts": [0.2, 1.0]}},
 "truth": {"threshold": {"intercept": 1.4, "slopes": {"theta": 0.2}},
           "drift": {"per": ["context"], "intercept": {"rich": 1.8, "lean": 1.0}},
           "nondecision": {"intercept": 0.3}},
 "study": {"keep": {"rt_min": 0.15, "rt_max": 5.0},
           "power": {"window": {"align": "onset", "from": -0.8, "to": -0.3}, "segment": 0.25, "overlap": 0.5,
                     "bands": {"theta": [4, 9]}, "scale": "log10", "standardize": "participant"},
           "fit": {"participants": "separate"},
           "models": [{"name": "baseline", "drift": {"per": ["context"]}},
                      {"name": "theta-threshold", "extends": "baseline", "threshold": {"slopes": {"theta": []}}}],
           "truth_model": "theta-threshold"}}
JSON
"$BANDLINK" simulate "$tmp/scenario.json" --out "$tmp/study" --quiet || { bad "simulate failed"; exit 1; }

for corr in max cluster; do
    /usr/bin/python3 - "$tmp/study/study.json" "$tmp/study/scan_$corr.json" "$corr" <<'PY'
import json, sys
s = json.load(open(sys.argv[1]))
s["scan"] = {"frequencies": {"from": 4, "to": 40, "count": 10, "spacing": "log", "bandwidth": 4},
             "windows": {"align": "onset", "from": -1.4, "to": 0.6, "length": 0.5, "step": 0.25},
             "parameters": ["threshold", "drift"], "null_model": "baseline", "permutations": 500,
             "correction": sys.argv[3]}
json.dump(s, open(sys.argv[2], "w"))
PY
    if ! "$BANDLINK" scan "$tmp/study/scan_$corr.json" --out "$tmp/res_$corr" --quiet 2>"$tmp/err_$corr"; then
        bad "$corr: scan failed: $(cat "$tmp/err_$corr")"
        continue
    fi
    csv="$tmp/res_$corr/scan.csv"
    # strongest cell: parameter, frequency, window, family-wise p
    best=$(awk -F, 'NR > 1 && $7 != "NA" && $7 > m { m = $7; b = $5 " " $1 " " $3 " " $4 " " $11 } END { print b }' "$csv")
    read -r par freq wfrom wto pfw <<< "$best"
    echo "$corr: strongest cell: $best"
    [ "$par" = threshold ] && pass "$corr: strongest cell is on the threshold" || bad "$corr: strongest cell on $par"
    awk -v f="$freq" 'BEGIN { exit !(f >= 4 && f <= 10) }' && pass "$corr: at $freq Hz, inside 4-10 Hz" ||
        bad "$corr: at $freq Hz, outside the theta band"
    awk -v a="$wfrom" -v b="$wto" 'BEGIN { exit !(a < -0.3 && b > -0.8) }' && pass "$corr: window $wfrom..$wto overlaps the bursts" ||
        bad "$corr: window $wfrom..$wto misses the bursts (-0.8..-0.3)"
    awk -v p="$pfw" 'BEGIN { exit !(p != "NA" && p <= 0.05) }' && pass "$corr: family-wise p = $pfw" ||
        bad "$corr: family-wise p = $pfw, not significant"
    high=$(awk -F, 'NR > 1 && $1 >= 15 && $11 != "NA" && $11 <= 0.05' "$csv" | wc -l)
    [ "$high" -eq 0 ] && pass "$corr: no family-wise significant cell at or above 15 Hz" ||
        bad "$corr: $high family-wise significant cells at or above 15 Hz"
done
[ $fail -eq 0 ] && echo "all passed"
exit $fail
