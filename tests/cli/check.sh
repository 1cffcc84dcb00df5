#!/usr/bin/env bash
# bandlink check: summary of the example study; a study without recordings; nothing written.
set -u
. "$(dirname "$0")/lib.sh"
ex="$BL_SOURCE_ROOT/docs/examples/power"
"$BANDLINK" check "$ex/study.json" >"$tmp/out" 2>"$tmp/err"
rc=$?
[ $rc -eq 0 ] && pass "check exits 0" || fail "check exit $rc: $(cat "$tmp/err")"
for want in "participants 2: r1 r2" "trials       48, kept 48" "1000 Hz, channels 1-2" "r1.flac: participant r1, 1000 Hz, 2 channels, 40 s, FLAC, 16-bit PCM, 24 trials" \
            "segment 500 samples, overlap 250, 3 segments" "resolution   2 Hz" "band theta        [4, 10] Hz: 4 bins" \
            "models       2: baseline, theta-threshold" "warnings     0"; do
    grep -qF "$want" "$tmp/out" && pass "summary has: $want" || fail "summary lacks: $want"
done
[ ! -e "$ex/results" ] && pass "check writes nothing" || fail "check wrote $ex/results"

# keep rules and exclusions by reason
mkdir -p "$tmp/s"
printf 'rat,rt,correct\nr1,0.1,1\nr1,0.5,0\nr1,n/a,1\nr2,4,1\nr2,0.6,1\n' > "$tmp/s/t.csv"
echo '{"trials": {"file": "t.csv", "participant": "rat", "rt": "rt", "response": "correct", "upper": [1], "keep": {"rt_min": 0.15, "rt_max": 3}}}' > "$tmp/s/study.json"
"$BANDLINK" check "$tmp/s/study.json" >"$tmp/out" 2>"$tmp/err" || fail "trials-only check: $(cat "$tmp/err")"
grep -qF "trials       5, kept 2, excluded 3" "$tmp/out" && pass "kept/excluded counts" || fail "counts: $(cat "$tmp/out")"
grep -qE "excluded +rt < keep.rt_min +1" "$tmp/out" && grep -qE "excluded +missing rt +1" "$tmp/out" \
    && grep -qE "excluded +rt > keep.rt_max +1" "$tmp/out" && pass "exclusions by reason" || fail "reasons: $(cat "$tmp/out")"
grep -qF "recordings   none" "$tmp/out" && pass "no recordings reported" || fail "recordings line"
# a BIDS-style events.tsv (CRLF, n/a, quoted text) as the trial table of the example recordings
mkdir -p "$tmp/bids"
ln -s "$ex/recordings" "$tmp/bids/recordings"
printf 'onset\tduration\ttrial_type\tresponse_time\tanimal\tchoice\r\n' > "$tmp/bids/events.tsv"
printf '2.6\t0.5\t"high"\t0.512\tr1\thigher\r\n4.2\t0.5\tlow\tn/a\tr1\tn/a\r\n5.8\t0.5\tlow\t0.44\tr2\tlower\r\n7.4\t0.5\thigh\t0.61\tr2\thigher\r\n' >> "$tmp/bids/events.tsv"
cat > "$tmp/bids/study.json" <<'JSON'
{"trials": {"file": "events.tsv", "participant": "animal", "rt": "response_time", "response": "choice",
            "upper": ["higher", "high"], "stimulus": "trial_type"},
 "recordings": {"file": "recordings/{animal}.flac", "onset": "onset", "channels": ["1-2"]},
 "power": {"window": {"from": -1, "to": 0}, "segment": 0.5, "bands": {"theta": [4, 10]}, "standardize": "none"}}
JSON
"$BANDLINK" check "$tmp/bids/study.json" >"$tmp/out" 2>"$tmp/err" || fail "BIDS events.tsv check: $(cat "$tmp/err")"
grep -qF "trials       4, kept 3, excluded 1" "$tmp/out" && grep -qE "excluded +missing rt +1" "$tmp/out" \
    && grep -qF "stimulus coding" "$tmp/out" && pass "BIDS events.tsv with n/a and CRLF" || fail "BIDS: $(cat "$tmp/out")"
"$BANDLINK" check --help | grep -q "usage: bandlink check" && pass "--help" || fail "--help"
finish
