#!/usr/bin/env bash
# Hostile and mistaken input: each case is bad input (exit 2) with one line naming the file and the
# line, column or key and the value, or a warning that names the real cause. Inputs are written here
# with python3's standard library (struct for RIFF/WAVE headers: Microsoft/IBM 1991 "Multimedia
# Programming Interface and Data Specifications 1.0"); FLAC files come from `bandlink simulate`.
set -u
: "${BANDLINK:?}" "${BL_SOURCE_ROOT:?}"
PY=/usr/bin/python3
[ -x "$PY" ] || { echo "skipped: python3 missing"; exit 77; }
fail=0
pass() { echo "PASS: $*"; }
bad() { echo "FAIL: $*"; fail=1; }
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT
cd "$tmp" || exit 1

# A folder with a 20 s mono 16-bit WAV of noise, ten trials and a study analysing one theta band.
"$PY" - <<'PY'
import os, random, struct
os.makedirs("rec", exist_ok=True)
def wav(path, channels, rate, frames, data=True, bits=16):
    block = channels * bits // 8
    body = random.Random(1).randbytes(frames * block)
    fmt = struct.pack("<HHIIHH", 1, channels, rate, (rate * block) & 0xFFFFFFFF, block, bits)
    chunks = b"fmt " + struct.pack("<I", len(fmt)) + fmt
    if data:
        chunks += b"data" + struct.pack("<I", len(body)) + body
    open(path, "wb").write(b"RIFF" + struct.pack("<I", 4 + len(chunks)) + b"WAVE" + chunks)
wav("rec/good.wav", 1, 1000, 20000)
wav("rec/ch0.wav", 0, 1000, 20000)
wav("rec/rate0.wav", 1, 0, 20000)
wav("rec/nodata.wav", 1, 1000, 20000, data=False)
wav("rec/ch65535.wav", 65535, 1000, 20, bits=8)
with open("trials.csv", "w") as f:
    f.write("participant,onset,rt,correct\n")
    for i in range(10):
        f.write("p1,%g,0.5,%d\n" % (2 + 1.5 * i, i % 2))
PY
study() { # study FILE TRIALS RECORDING [extra power keys] [extra recordings keys]
    cat > "$1" <<JSON
{"trials": {"file": "$2", "participant": "participant", "rt": "rt", "response": "correct", "upper": ["1"]},
 "recordings": {"file": "$3", "onset": "onset", "unit": "uV", "channels": ["1"]${5:-}},
 "power": {"window": {"align": "onset", "from": -1.0, "to": 0.0}, "segment": 0.5, "bands": {"theta": [4, 10]}${4:-}},
 "models": [{"name": "baseline"}]}
JSON
}
# expect NAME COMMAND-ARGS... -- PATTERN...: exit 2, exactly one error line, every pattern in it.
expect() {
    local name=$1; shift
    local args=()
    while [ "$1" != "--" ]; do args+=("$1"); shift; done
    shift
    "$BANDLINK" "${args[@]}" >out.txt 2>err.txt
    local rc=$? ok=1
    [ $rc -eq 2 ] || ok=0
    [ "$(grep -c 'bandlink: error:' err.txt)" -eq 1 ] || ok=0
    for p in "$@"; do grep -qF -- "$p" err.txt || ok=0; done
    [ $ok -eq 1 ] && pass "$name" || bad "$name: exit $rc, wanted 2 and [$*]: $(cat err.txt)"
}

# --- recordings that are not usable (libsndfile refuses them): bad input, not a crash of the run ---
for r in ch0:"Channel count is zero" rate0:"rate0.wav" nodata:"data" ch65535:"Too many channels"; do
    name=${r%%:*}; why=${r#*:}
    study "s_$name.json" trials.csv "rec/$name.wav"
    expect "recording $name.wav is bad input" power "s_$name.json" --out "o_$name" -- "$name.wav" "cannot open the recording" "$why"
done
"$BANDLINK" simulate "$BL_SOURCE_ROOT/tests/cli/simulate_small.json" --out sim --quiet || bad "simulate for the FLAC cases"
cp sim/recordings/a2.flac a2.bak
head -c 900000 a2.bak > sim/recordings/a2.flac
expect "truncated FLAC is bad input" power sim/study.json --out o_trunc -- "a2.flac" "truncated or damaged"
"$PY" -c "
b = bytearray(open('a2.bak', 'rb').read())
for i in range(300000, len(b) - 4096, 997): b[i] ^= 0x5A
open('sim/recordings/a2.flac', 'wb').write(b)"
expect "corrupt FLAC is bad input" power sim/study.json --out o_corrupt -- "a2.flac" "participant a2"
cp a2.bak sim/recordings/a2.flac

# --- tables that are not UTF-8 ---
printf 'participant,onset,rt,correct\np1,2,0.5,1\np\xff2,3.5,0.5,0\n' > latin1.csv
study s_latin1.json latin1.csv rec/good.wav
expect "a byte that is not UTF-8 names file, line, column and byte" check s_latin1.json -- "latin1.csv:3:2" '\xFF' "UTF-8"
printf 'participant,onset,rt,correct\np1,2,0.5,1\np\xc3\xa92,3.5,0.5,0\np1,5,0.5,0\np\xc3\xa92,6.5,0.5,1\n' > utf8.csv
study s_utf8.json utf8.csv rec/good.wav
"$BANDLINK" check s_utf8.json >/dev/null 2>err.txt && pass "valid UTF-8 (é) is accepted" || bad "UTF-8 table: $(cat err.txt)"

# --- spreadsheet formulas and terminal control characters from input values ---
"$PY" - <<'PY'
with open("formula.csv", "w") as f:
    f.write("participant,onset,rt,correct,note\n")
    for i in range(10):
        part = "=HYPERLINK(\"http://x\")" if i < 5 else "+p2"
        note = "-1.5" if i % 2 else "@SUM(A1)"
        f.write('"%s",%g,0.5,%d,%s\n' % (part.replace('"', '""'), 2 + 1.5 * i, i % 2, note))
PY
study s_formula.json formula.csv rec/good.wav ', "standardize": "none"'
if "$BANDLINK" power s_formula.json --out o_formula --quiet 2>err.txt; then
    # OWASP "CSV Injection": text cells starting with = + - @ get a leading single quote; numbers do not.
    grep -qF "\"'=HYPERLINK(\"\"http://x\"\")\"" o_formula/power.csv && grep -qF "'+p2," o_formula/power.csv \
        && grep -qF ",'@SUM(A1)," o_formula/power.csv && grep -qF ",-1.5," o_formula/power.csv \
        && ! grep -qF "'-1.5" o_formula/power.csv \
        && pass "power.csv: formula starts neutralised, -1.5 left as a number" || bad "formula cells: $(head -4 o_formula/power.csv)"
else
    bad "power with formula-like text: $(cat err.txt)"
fi
printf 'participant,onset,rt,correct\np1,2,0.5,\033[31mred\np1,3.5,0.5,\007bell\n' > esc.csv
study s_esc.json esc.csv rec/good.wav
expect "control characters from values are escaped in the message" check s_esc.json -- 'trials.upper value "1"' '\x1B[31mred' '\x07bell'
printf 'participant,onset,rt,correct\np1,2,\033[2Jquick,1\np1,3.5,0.5,0\n' > esc_rt.csv
study s_esc_rt.json esc_rt.csv rec/good.wav
expect "ESC in a non-numeric RT is shown as \\x1B" check s_esc_rt.json -- "esc_rt.csv:2" '\x1B[2Jquick'
[ -s err.txt ] && ! grep -q $'\033' err.txt && pass "no raw ESC in the message" || bad "raw ESC reached the terminal message"
printf 'participant,onset,rt,correct,artifact\np1,2,0.5,1,x\np1,3.5,0.5,0,y\n' > artcol.csv
study s_artcol.json artcol.csv rec/good.wav
expect "table column 'artifact' clashes with power.csv's" check s_artcol.json -- 'column "artifact"' "power.csv's artifact column"
printf 'animal,participant,onset,rt,correct\np1,x,2,0.5,1\np1,y,3.5,0.5,0\n' > partcol.csv
sed 's/"participant": "participant"/"participant": "animal"/' s_artcol.json | sed 's/artcol.csv/partcol.csv/' > s_partcol.json
expect "table column 'participant' (not the participant column) clashes" check s_partcol.json -- 'column "participant"' "power.csv's participant column"
study s_bands.json trials.csv rec/good.wav
sed -i 's/"bands": {"theta": \[4, 10\]}/"bands": {"theta": [4, 10], "theta_power": [12, 20]}/' s_bands.json
expect "band theta_power clashes with theta's raw power column" check s_bands.json -- 'band "theta"' 'band "theta_power"' '"theta_power"'

# --- band power that differs only by rounding noise is not standardized ---
"$PY" - <<'PY'
import math, random
rng = random.Random(7)
base = [rng.gauss(0, 1) for _ in range(1000)]       # one second at 1000 Hz, repeated in every trial
with open("rec/noise.csv", "w") as f:
    f.write("ch1\n")
    for k in range(20):                                 # second k scaled by 1 + k*1e-14: rounding noise
        for x in base:
            f.write("%.17g\n" % (x * (1 + k * 1e-14)))
with open("same.csv", "w") as f:
    f.write("participant,onset,rt,correct\n")
    for i in range(12):
        f.write("p1,%d,0.5,%d\n" % (2 + i, i % 2))
PY
study s_same.json same.csv rec/noise.csv "" ', "rate": 1000'
expect "relative spread ~1e-14 is refused, naming participant and band" power s_same.json --out o_same -- "band theta" "participant p1" "below 1e-9"

# --- response coding and RT units ---
printf 'participant,onset,rt,correct\np1,2,0.5,right\np1,3.5,0.5,left\np1,5,0.6,right\n' > rl.csv
study s_rl.json rl.csv rec/good.wav
sed -i 's/"upper": \["1"\]/"upper": ["Right"]/' s_rl.json
expect "upper [\"Right\"] against right/left names the values present" check s_rl.json -- 'trials.upper value "Right"' '"right"' '"left"'
"$PY" - <<'PY'
with open("ms.csv", "w") as f:
    f.write("participant,onset,rt,correct\n")
    for i in range(10):
        f.write("p1,%g,%d,%d\n" % (2 + 1.5 * i, 400 + 37 * i, i % 2))   # milliseconds
PY
study s_ms.json ms.csv rec/good.wav
"$BANDLINK" check s_ms.json >/dev/null 2>err.txt
grep -qF "median response time" err.txt && grep -qF "rt_unit" err.txt && pass "RTs in ms declared as s: warning" \
    || bad "no RT-scale warning: $(cat err.txt)"

# --- huge numbers ---
printf 'participant,onset,rt,correct\np1,2,0.5,1\np1,1e300,0.5,0\np1,5,0.5,0\n' > huge_onset.csv
study s_onset.json huge_onset.csv rec/good.wav
expect "onset 1e300 names line, column and value" power s_onset.json --out o_onset -- "huge_onset.csv:3" '"onset"' "1e+300"
study s_from.json trials.csv rec/good.wav
sed -i 's/"from": -1.0/"from": -1e9/' s_from.json
expect "window.from -1e9 names the key and value" check s_from.json -- "power.window.from" "-1000000000"
"$PY" - <<'PY'
import random
r = random.Random(3)
with open("rec/huge.csv", "w") as f:
    f.write("ch1\n")
    for i in range(20000):
        f.write("%.6g\n" % (r.gauss(0, 1) * (1e200 if 6000 < i < 9000 else 1)))
PY
study s_huge.json trials.csv rec/huge.csv "" ', "rate": 1000'
"$BANDLINK" power s_huge.json --out o_huge >/dev/null 2>err.txt
grep -qF "non-finite band power" err.txt && ! grep -qF "silent" err.txt && pass "samples near 1e200: the overflow is named" \
    || bad "huge samples: $(cat err.txt)"

# --- placeholders that join into '..' ---
mkdir -p inner/rec && cp rec/good.wav inner/rec/good.wav && cp rec/good.wav good_outside.wav
printf 'participant,onset,rt,correct,a,b\np1,2,0.5,1,.,.\np1,3.5,0.5,0,.,.\n' > inner/dots.csv
study inner/s_dots.json dots.csv '{a}{b}/good_outside.wav'
expect "{a}{b} with a = b = '.' cannot leave the study folder" power inner/s_dots.json --out o_dots -- "dots.csv:2" '../good_outside.wav"' "leads out of the folder"

exit $fail
