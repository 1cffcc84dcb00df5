#!/usr/bin/env bash
# Scaling with the number of trials (no timed assertions: ratios within one run).
# 1. Peak memory of `bandlink power` at 20 kHz with 1 s segments (10,001 frequency bins) is roughly the
#    same for 400 and for 1,600 trials: per-trial spectra are not kept (keeping them costs 80 kB a trial,
#    96 MB more for the larger run). Peak resident size from getrusage(RUSAGE_CHILDREN).ru_maxrss (POSIX),
#    the same measure as memory_scaling.sh.
# 2. `bandlink check` of a table with one trial per participant: 4x the participants costs less than
#    8x the CPU time (linear or n log n gives about 4; comparing each new participant with every one
#    seen so far gives 16). CPU time of the child (ru_utime + ru_stime), not wall time, so other load on
#    the machine does not count.
set -u
: "${BANDLINK:?}"
PY=/usr/bin/python3
[ -x "$PY" ] || { echo "skipped: python3 missing"; exit 77; }
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
"$PY" - "$BANDLINK" "$work" <<'PY'
import json, os, random, resource, struct, subprocess, sys

bandlink, work = sys.argv[1], sys.argv[2]
fail = 0

def child_usage(args):
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    p = subprocess.run(args, capture_output=True, text=True)
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    if p.returncode != 0:
        print("FAIL: %s: %s" % (" ".join(args[:2]), p.stderr.strip()))
        sys.exit(1)
    cpu = (after.ru_utime + after.ru_stime) - (before.ru_utime + before.ru_stime)
    return after.ru_maxrss, cpu

# ---- 1. memory of band power with 4x the trials ----
rate, seconds = 20000, 40
rng = random.Random(11)
os.makedirs(os.path.join(work, "rec"))
frames = rate * seconds
with open(os.path.join(work, "rec", "p1.wav"), "wb") as f:   # RIFF/WAVE, 16-bit PCM mono
    fmt = struct.pack("<HHIIHH", 1, 1, rate, rate * 2, 2, 16)
    f.write(b"RIFF" + struct.pack("<I", 4 + 8 + len(fmt) + 8 + 2 * frames) + b"WAVE")
    f.write(b"fmt " + struct.pack("<I", len(fmt)) + fmt + b"data" + struct.pack("<I", 2 * frames))
    for _ in range(seconds):  # a second at a time: this process stays small (its size shows in a forked child)
        f.write(struct.pack("<%dh" % rate, *[int(rng.gauss(0, 3000)) for _ in range(rate)]))

def power_study(n):
    d = os.path.join(work, "p%d" % n)
    os.makedirs(d)
    os.symlink(os.path.join(work, "rec"), os.path.join(d, "rec"))
    with open(os.path.join(d, "trials.csv"), "w") as f:
        f.write("participant,onset,rt,correct\n")
        for i in range(n):   # windows may overlap: trials cycle through the recording
            f.write("p1,%.4f,%.3f,%d\n" % (1.5 + (i * 0.37) % (seconds - 3), 0.4 + 0.001 * (i % 300), i % 2))
    study = {"trials": {"file": "trials.csv", "participant": "participant", "rt": "rt", "response": "correct",
                        "upper": ["1"]},
             "recordings": {"file": "rec/p1.wav", "onset": "onset", "unit": "uV", "gain": 1000},
             "power": {"window": {"align": "onset", "from": -1.0, "to": 0.0}, "segment": 1.0,
                       "bands": {"theta": [4, 10], "gamma": [60, 200]}},
             "models": [{"name": "baseline"}]}
    json.dump(study, open(os.path.join(d, "study.json"), "w"))
    return d

small, large = power_study(400), power_study(1600)
kib_small, _ = child_usage([bandlink, "power", os.path.join(small, "study.json"), "--out", os.path.join(small, "o"),
                            "--threads", "1", "--quiet"])
kib_large, _ = child_usage([bandlink, "power", os.path.join(large, "study.json"), "--out", os.path.join(large, "o"),
                            "--threads", "1", "--quiet"])
grow = (kib_large - kib_small) / 1024
ok = grow < 16
print("%s: band power, 400 -> 1600 trials at 20 kHz (10,001 bins): peak RSS %.1f -> %.1f MiB (+%.1f MiB, limit 16)"
      % ("PASS" if ok else "FAIL", kib_small / 1024, kib_large / 1024, grow))
fail |= not ok
rows = sum(1 for _ in open(os.path.join(large, "o", "power.csv")))
ok = rows == 1601
print("%s: power.csv of the large run has 1600 trial rows" % ("PASS" if ok else "FAIL"))
fail |= not ok

# ---- 2. participants: 4x as many costs < 8x the CPU time ----
def participants_study(n):
    d = os.path.join(work, "c%d" % n)
    os.makedirs(d)
    with open(os.path.join(d, "trials.csv"), "w") as f:
        f.write("participant,rt,correct\n")
        for i in range(n):
            f.write("s%07d,%.3f,%d\n" % ((i * 7919) % n, 0.3 + 0.001 * (i % 500), i % 2))
    json.dump({"trials": {"file": "trials.csv", "participant": "participant", "rt": "rt", "response": "correct",
                          "upper": ["1"]}, "models": [{"name": "baseline"}]},
              open(os.path.join(d, "study.json"), "w"))
    return os.path.join(d, "study.json")

n = 30000
cpu = []
for k in (n, 4 * n):
    s = participants_study(k)
    best = min(child_usage([bandlink, "check", s])[1] for _ in range(2))
    cpu.append(best)
ratio = cpu[1] / max(cpu[0], 0.01)
ok = ratio < 8
print("%s: check with %d and %d participants: CPU %.2f s and %.2f s, ratio %.1f (limit 8; quadratic gives 16)"
      % ("PASS" if ok else "FAIL", n, 4 * n, cpu[0], cpu[1], ratio))
fail |= not ok
sys.exit(1 if fail else 0)
PY
