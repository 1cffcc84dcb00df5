#!/usr/bin/env bash
# bandlink power on the committed example study (FLAC) and on WAV / CSV-trace copies of it: power.csv written,
# not overwritten without --force, identical bytes for any --threads.
set -u
. "$(dirname "$0")/lib.sh"
ex="$BL_SOURCE_ROOT/docs/examples/power"

out=$("$BANDLINK" power "$ex/study.json" --out "$tmp/a" 2>"$tmp/err")
rc=$?
[ $rc -eq 0 ] && pass "power exits 0" || fail "power exit $rc: $(cat "$tmp/err")"
case "$out" in *"48 trials"*) pass "summary line: $out" ;; *) fail "summary line: $out" ;; esac
head -1 "$tmp/a/power.csv" | grep -qx 'participant,trial,rat,onset,rt,correct,difficulty,context,theta_power,theta,beta_power,beta,artifact' \
    && pass "power.csv header" || fail "power.csv header: $(head -1 "$tmp/a/power.csv")"
[ "$(wc -l < "$tmp/a/power.csv")" -eq 49 ] && pass "48 rows + header" || fail "row count $(wc -l < "$tmp/a/power.csv")"

"$BANDLINK" power "$ex/study.json" --out "$tmp/a" >/dev/null 2>"$tmp/err"
rc=$?
[ $rc -eq 2 ] && grep -q "already exists; use --force" "$tmp/err" && pass "existing power.csv kept without --force (exit 2)" \
    || fail "overwrite guard: exit $rc, $(cat "$tmp/err")"
cp "$tmp/a/power.csv" "$tmp/first.csv"
"$BANDLINK" power "$ex/study.json" --out "$tmp/a" --force --threads 2 --quiet 2>"$tmp/err" && [ ! -s "$tmp/err" ] \
    && pass "--force --threads 2 --quiet" || fail "--force: $(cat "$tmp/err")"
cmp -s "$tmp/first.csv" "$tmp/a/power.csv" && pass "2 threads: identical bytes" || fail "threads change output"
"$BANDLINK" power "$ex/study.json" --out "$tmp/a" --force --threads 1 --quiet && cmp -s "$tmp/first.csv" "$tmp/a/power.csv" \
    && pass "1 thread: identical bytes" || fail "1 thread differs"

# the same recordings as 32-bit float WAV and as CSV traces give the same band power (16-bit values are exact in both)
if [ -x /usr/bin/python3 ] && /usr/bin/python3 -c "import soundfile, numpy" 2>/dev/null; then
    mkdir -p "$tmp/wav/recordings" "$tmp/csv/recordings"
    cp "$ex/trials.csv" "$tmp/wav/"; cp "$ex/trials.csv" "$tmp/csv/"
    /usr/bin/python3 - "$ex" "$tmp" <<'PY'
import sys, numpy as np, soundfile as sf
ex, tmp = sys.argv[1], sys.argv[2]
for r in ("r1", "r2"):
    x, fs = sf.read(f"{ex}/recordings/{r}.flac", dtype="float64")
    sf.write(f"{tmp}/wav/recordings/{r}.wav", x, fs, subtype="FLOAT")
    np.savetxt(f"{tmp}/csv/recordings/{r}.csv", x, delimiter=",", header="ch1,ch2", comments="", fmt="%.17g")
PY
    sed 's/{rat}.flac/{rat}.wav/' "$ex/study.json" > "$tmp/wav/study.json"
    sed 's/{rat}.flac/{rat}.csv/; s/"unit": "mV",/"unit": "mV", "rate": 1000,/' "$ex/study.json" > "$tmp/csv/study.json"
    for k in wav csv; do
        "$BANDLINK" power "$tmp/$k/study.json" --out "$tmp/$k/out" --quiet 2>"$tmp/err" || fail "$k: $(cat "$tmp/err")"
        cmp -s "$tmp/first.csv" "$tmp/$k/out/power.csv" && pass "$k recordings give the same power.csv as FLAC" \
            || fail "$k power.csv differs from FLAC"
    done
else
    echo "note: python3 soundfile missing; WAV/CSV copies not checked"
fi

"$BANDLINK" power --help | grep -q "usage: bandlink power" && pass "--help" || fail "--help"
"$BANDLINK" power 2>"$tmp/err"; [ $? -eq 2 ] && pass "no study: exit 2" || fail "no study"
"$BANDLINK" power "$ex/study.json" --threads x 2>"$tmp/err"; [ $? -eq 2 ] && grep -q -- "--threads" "$tmp/err" && pass "bad --threads: exit 2" || fail "bad --threads"
"$BANDLINK" power "$ex/study.json" --bogus 2>"$tmp/err"; [ $? -eq 2 ] && grep -q -- "--bogus" "$tmp/err" && pass "unknown option: exit 2" || fail "unknown option"
finish
