#!/usr/bin/env bash
# bandlink simulate from the command line: the files of a synthetic study, determinism for a seed,
# no-clobber/--force, strict scenario errors, WAV output, and (with python3-soundfile/scipy) the signal
# itself: 24-bit at 1000 Hz, a mains line in each contact that the bipolar difference removes.
set -u
. "$(dirname "$0")/lib.sh"
: "${BANDLINK:?}" "${BL_SOURCE_ROOT:?}"
scen="$BL_SOURCE_ROOT/tests/cli/simulate_small.json"

"$BANDLINK" simulate "$scen" --out "$tmp/s1" --threads 2 >"$tmp/out1" 2>"$tmp/err1" && pass "simulate exits 0" \
    || bail "simulate failed: $(cat "$tmp/err1")"
for f in study.json trials.csv truth.json truth_trials.csv recordings/a1.flac recordings/a2.flac recordings/a3.flac; do
    [ -s "$tmp/s1/$f" ] && pass "file $f written" || fail "file $f missing"
done
grep -q "simulated 3 participants, 720 trials" "$tmp/out1" && pass "summary line" || fail "summary: $(cat "$tmp/out1")"
head -1 "$tmp/s1/trials.csv" | grep -qx "animal,trial,onset,difficulty,context,tone,choice,correct,rt" \
    && pass "trials.csv header" || fail "trials.csv header: $(head -1 "$tmp/s1/trials.csv")"
[ "$(wc -l <"$tmp/s1/trials.csv")" -eq 721 ] && pass "trials.csv has 720 rows" || fail "trials.csv rows"
ls -a "$tmp" | grep -q partial && fail "a staging folder was left behind" || pass "no staging folder left"

# The generated study is accepted by the study parser.
if "$BANDLINK" check "$tmp/s1/study.json" >/dev/null 2>"$tmp/errc"; then pass "bandlink check accepts study.json"
else
    grep -q "not built yet" "$tmp/errc" && echo "SKIP: bandlink check not built" || fail "check: $(cat "$tmp/errc")"
fi

# Same seed -> byte-identical folder; another seed -> other behaviour.
"$BANDLINK" simulate "$scen" --out "$tmp/s2" --threads 1 --quiet && diff -r "$tmp/s1" "$tmp/s2" >/dev/null \
    && pass "same seed (1 vs 2 threads): byte-identical study" || fail "same seed gave different files"
"$BANDLINK" simulate "$scen" --out "$tmp/s3" --seed 7 --quiet && ! cmp -s "$tmp/s1/trials.csv" "$tmp/s3/trials.csv" \
    && ! cmp -s "$tmp/s1/recordings/a1.flac" "$tmp/s3/recordings/a1.flac" \
    && pass "--seed 7 gives other recordings and behaviour" || fail "--seed did not change the output"
grep -Eq '"seed":[[:space:]]*7,' "$tmp/s3/truth.json" && pass "truth.json records the seed" || fail "truth.json seed"

# No clobber without --force; --force replaces.
before=$(cd "$tmp/s1" && find . -type f -exec sha256sum {} + | sort)
"$BANDLINK" simulate "$scen" --out "$tmp/s1" --seed 9 >"$tmp/o" 2>"$tmp/e"; rc=$?
[ $rc -eq 2 ] && grep -q "$tmp/s1 already exists" "$tmp/e" && pass "existing folder: exit 2 naming it" \
    || fail "no-clobber: rc $rc, $(cat "$tmp/e")"
after=$(cd "$tmp/s1" && find . -type f -exec sha256sum {} + | sort)
[ "$before" = "$after" ] && pass "refused run left the folder untouched" || fail "folder changed"
"$BANDLINK" simulate "$scen" --out "$tmp/s1" --seed 9 --force --quiet && cmp -s "$tmp/s1/trials.csv" <(
    "$BANDLINK" simulate "$scen" --out "$tmp/s9" --seed 9 --quiet && cat "$tmp/s9/trials.csv") \
    && pass "--force replaced the folder" || fail "--force"

# Bad scenarios: exit 2, the key path named.
sed 's/"amplitude": 30/"amplitud": 30/' "$scen" >"$tmp/bad.json"
"$BANDLINK" simulate "$tmp/bad.json" --out "$tmp/b" 2>"$tmp/e"; rc=$?
[ $rc -eq 2 ] && grep -q "bursts.theta.amplitud: unknown key" "$tmp/e" && [ ! -e "$tmp/b" ] \
    && pass "unknown key: exit 2 naming bursts.theta.amplitud" || fail "unknown key: rc $rc $(cat "$tmp/e")"
sed 's/"full_scale": 4000/"full_scale": 20/' "$scen" >"$tmp/clip.json"
"$BANDLINK" simulate "$tmp/clip.json" --out "$tmp/c" 2>"$tmp/e"; rc=$?
[ $rc -eq 2 ] && grep -q "beyond recording.full_scale" "$tmp/e" && [ ! -e "$tmp/c" ] \
    && pass "signal beyond full scale: exit 2, nothing written" || fail "clipping: rc $rc $(cat "$tmp/e")"
sed 's/"truth_model": "theta-and-beta"/"truth_model": "baseline"/' "$scen" >"$tmp/tm.json"
"$BANDLINK" simulate "$tmp/tm.json" --out "$tmp/t" 2>"$tmp/e"; rc=$?
[ $rc -eq 2 ] && grep -q "truth.threshold: its intercepts/slopes do not have the structure of model 'baseline'" "$tmp/e" \
    && pass "truth structure checked against the truth model" || fail "truth model: rc $rc $(cat "$tmp/e")"
# A truth model that estimates contamination: simulate draws none, so it says so (not "give its true value",
# which the truth keys would then refuse).
sed 's/{"name": "theta-and-beta", /{"name": "theta-and-beta", "contamination": {}, /' "$scen" >"$tmp/tc.json"
"$BANDLINK" simulate "$tmp/tc.json" --out "$tmp/tc" 2>"$tmp/e"; rc=$?
[ $rc -eq 2 ] && grep -q "estimates contamination, which simulate does not draw" "$tmp/e" && [ ! -e "$tmp/tc" ] \
    && pass "a truth model estimating contamination: exit 2 saying why" || fail "contamination truth: rc $rc $(cat "$tmp/e")"
"$BANDLINK" simulate "$scen" 2>"$tmp/e"; rc=$?
[ $rc -eq 2 ] && grep -q "missing --out" "$tmp/e" && pass "missing --out: usage error" || fail "missing --out: rc $rc"
"$BANDLINK" simulate "$scen" --out "$tmp/x" --bogus 2>"$tmp/e"; rc=$?
[ $rc -eq 2 ] && grep -q "unknown option '--bogus'" "$tmp/e" && pass "unknown option: usage error" || fail "unknown option"

# WAV output.
sed 's/"format": "flac"/"format": "wav"/' "$scen" >"$tmp/wav.json"
"$BANDLINK" simulate "$tmp/wav.json" --out "$tmp/w" --quiet && [ -s "$tmp/w/recordings/a1.wav" ] \
    && grep -q 'recordings/{animal}.wav' "$tmp/w/study.json" && pass "format wav: WAV recordings and study pattern" \
    || fail "wav output"
cmp -s "$tmp/w/trials.csv" "$tmp/s2/trials.csv" && pass "WAV and FLAC (both 24-bit, lossless) give the same trials" \
    || fail "WAV and FLAC differ in behaviour"

# The signal (python3 with soundfile + scipy; skipped otherwise).
py=/usr/bin/python3
if [ -x "$py" ] && "$py" -c "import soundfile, scipy.signal, numpy" 2>/dev/null; then
    tally "$py" - "$tmp/s2" <<'PY'
import json, sys
import numpy as np, soundfile as sf
from scipy.signal import welch
d = sys.argv[1]
ok = True
def check(c, msg):
    global ok
    print(("PASS: " if c else "FAIL: ") + msg)
    ok = ok and c
info = sf.info(d + "/recordings/a1.flac")
check(info.samplerate == 1000 and info.channels == 2 and info.subtype == "PCM_24",
      "a1.flac: 1000 Hz, 2 channels, 24-bit (%s, %d Hz, %d ch)" % (info.subtype, info.samplerate, info.channels))
x, fs = sf.read(d + "/recordings/a1.flac")
x = x * 4000.0  # gain = full_scale, in uV
f, p1 = welch(x[:, 0], fs=fs, nperseg=2000)
f, pd = welch(x[:, 0] - x[:, 1], fs=fs, nperseg=2000)
i50 = int(np.argmin(abs(f - 50)))
nb = np.r_[i50 - 20:i50 - 5, i50 + 5:i50 + 20]
line1 = p1[i50] / np.median(p1[nb]); lined = pd[i50] / np.median(pd[nb])
check(line1 > 100, "contact 1 carries the 50 Hz common-mode line (peak/neighbours %.0f)" % line1)
check(lined < 3, "the bipolar difference removes it (peak/neighbours %.2f)" % lined)
# 1/f-like background in the difference: log-log slope over 30-45 Hz and 60-200 Hz (above the bursts).
sel = ((f > 30) & (f < 45)) | ((f > 60) & (f < 200))
slope = np.polyfit(np.log10(f[sel]), np.log10(pd[sel]), 1)[0]
check(-1.3 < slope < -0.7, "bipolar background spectrum ~ 1/f (log-log slope %.2f)" % slope)
study = json.load(open(d + "/study.json"))
check(study["recordings"]["gain"] == 4000 and study["recordings"]["channels"] == ["1-2"], "study.json reads the pair 1-2 with gain = full scale")
truth = json.load(open(d + "/truth.json"))
co = {(c["parameter"], c["term"], c["level"]): c["value"] for c in truth["coefficients"]}
check(co.get(("threshold", "theta", "rich")) == 0.35 and co.get(("drift", "beta", "")) == -0.25
      and co.get(("nondecision", "intercept", "")) == 0.25, "truth.json: coefficients on the fitted terms and levels")
sys.exit(0 if ok else 1)
PY
else
    echo "SKIP: python3 soundfile/scipy not installed; signal checks skipped"
fi

finish
