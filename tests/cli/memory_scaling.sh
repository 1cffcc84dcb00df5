#!/usr/bin/env bash
# Peak memory of `bandlink run` grows with the analysis window, not with the recording's length:
# the same 120 trials are analysed from a 10 MB and from a 1 GB float WAV (the long one is a sparse
# file: libsndfile reads its holes as zeros, so it costs no disk), and the peak resident sizes
# (getrusage RUSAGE_CHILDREN ru_maxrss, POSIX) must differ by less than 16 MiB.
set -u
. "$(dirname "$0")/lib.sh"
: "${BANDLINK:?}"
PY=/usr/bin/python3
"$PY" -c 'import numpy' 2>/dev/null || skip "python3-numpy missing"
work=$tmp
tally "$PY" - "$BANDLINK" "$work" <<'PY'
import json, os, resource, struct, subprocess, sys
import numpy as np

bandlink, work = sys.argv[1], sys.argv[2]
rate, channels = 1000, 2
rng = np.random.default_rng(5)
n_trials = 120

def write_wav(path, frames, onsets):
    """IEEE-float WAV (RIFF/WAVE, format tag 3) holding noise around each onset and a hole elsewhere."""
    data_bytes = frames * channels * 4
    with open(path, "wb") as f:
        f.write(b"RIFF" + struct.pack("<I", 36 + data_bytes) + b"WAVE")
        f.write(b"fmt " + struct.pack("<IHHIIHH", 16, 3, channels, rate, rate * channels * 4, channels * 4, 32))
        f.write(b"data" + struct.pack("<I", data_bytes))
        start = f.tell()
        for t in onsets:
            first = int(round((t - 1.5) * rate))
            block = rng.normal(0, 20, size=(2 * rate, channels)).astype("<f4")
            f.seek(start + first * channels * 4)
            f.write(block.tobytes())
        f.truncate(start + data_bytes)

def make_study(name, frames):
    d = os.path.join(work, name)
    os.makedirs(os.path.join(d, "rec"))
    span = frames / rate - 10
    onsets = np.sort(rng.uniform(5, span, n_trials)) if name == "long" else 5 + 1.8 * np.arange(n_trials)
    write_wav(os.path.join(d, "rec", "p1.wav"), frames, onsets)
    rts = 0.3 + rng.gamma(2.0, 0.15, n_trials)
    correct = (rng.uniform(size=n_trials) < 0.8).astype(int)
    with open(os.path.join(d, "trials.csv"), "w") as f:
        f.write("participant,onset,rt,correct\n")
        for t, r, c in zip(onsets, rts, correct):
            f.write("p1,%.4f,%.4f,%d\n" % (t, r, c))
    study = {
        "trials": {"file": "trials.csv", "participant": "participant", "rt": "rt", "rt_unit": "s",
                   "response": "correct", "upper": ["1"]},
        "recordings": {"file": "rec/{participant}.wav", "onset": "onset", "gain": 1.0, "unit": "uV",
                       "channels": ["1-2"]},
        "power": {"window": {"align": "onset", "from": -1.0, "to": 0.0}, "segment": 0.5, "overlap": 0.5,
                  "bands": {"theta": [4, 10]}, "scale": "log10", "standardize": "participant"},
        "models": [{"name": "baseline"}, {"name": "theta-threshold", "extends": "baseline",
                                          "threshold": {"slopes": {"theta": []}}}],
    }
    json.dump(study, open(os.path.join(d, "study.json"), "w"))
    return d

def peak_kib(d):
    before = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    p = subprocess.run([bandlink, "run", os.path.join(d, "study.json"), "--out", os.path.join(d, "out"),
                        "--threads", "1", "--quiet"], capture_output=True, text=True)
    after = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    if p.returncode != 0:
        print("FAIL: run in %s: %s" % (d, p.stderr.strip()))
        sys.exit(1)
    # ru_maxrss of children is the maximum over all waited-for children; run the small one first.
    return max(after, before)

small = make_study("short", 10 * 60 * rate)                  # 10 minutes: 4.8 MB
long_ = make_study("long", (1 << 30) // (channels * 4))      # 1 GiB of samples, ~37 h
size = os.path.getsize(os.path.join(long_, "rec", "p1.wav"))
small_kib = peak_kib(small)
long_kib = peak_kib(long_)
print("peak RSS: %.1f MiB with a %.1f MB recording, %.1f MiB with a %.2f GB recording" %
      (small_kib / 1024, os.path.getsize(os.path.join(small, "rec", "p1.wav")) / 1e6, long_kib / 1024, size / 1e9))
ok = size >= 1 << 30 and long_kib - small_kib < 16 * 1024
print("%s: peak memory independent of recording length (difference %.1f MiB, limit 16 MiB)" %
      ("PASS" if ok else "FAIL", (long_kib - small_kib) / 1024))
sys.exit(0 if ok else 1)
PY
finish
