#!/usr/bin/python3
"""`bandlink run` from a "bids" block alone, on a BIDS-shaped tree generated here (BIDS 1.x layout:
sub-<label>/eeg/sub-<label>_task-<task>_events.tsv with onset and duration first, *_channels.tsv with a
status column, participants.tsv with participant_id; recordings in three formats, one per participant:
EDF (Kemp et al. 1992), BrainVision 1.0, BDF (BioSemi 24-bit), found through "<stem>_eeg.*").
Checks: the run succeeds; power.csv carries participant (from the path), session-free entities, the
participants.tsv columns and the split trial_type; band power of every trial equals python3-mne's samples
+ scipy.signal.welch; a channel marked bad is refused by name; an events file without onset, and a
trial_type that does not split, are exit 2 naming the file, with nothing written.
Exit 77 (skipped) without mne/scipy. usage: bids_run.py BANDLINK"""
import csv
import json
import math
import os
import shutil
import subprocess
import sys
import tempfile
import warnings

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
try:
    import numpy as np
    import mne
    from scipy.signal import welch
except ImportError:
    print("mne/scipy not installed: skipped")
    sys.exit(77)
import format_writers as fw

mne.set_log_level("ERROR")
warnings.simplefilter("ignore")
bandlink = sys.argv[1]
rng = np.random.default_rng(9)
failed = passed = 0
FS = 256
LABELS = ["Fz", "Cz", "Pz", "T7"]


def check(name, ok, detail=""):
    global failed, passed
    passed += bool(ok)
    failed += not ok
    print(f"{'PASS' if ok else 'FAIL'}: {name}{': ' + detail if detail else ''}")


def rnd(x):
    return int(math.floor(abs(x) + 0.5)) * (1 if x >= 0 else -1)


def make_tree(root):
    writers = {}
    for k, sub in enumerate(("01", "02", "03")):
        d = os.path.join(root, f"sub-{sub}", "eeg")
        os.makedirs(d)
        stem = os.path.join(d, f"sub-{sub}_task-dots_eeg")
        n = FS * 60
        t = np.arange(n) / FS
        x = 8 * rng.standard_normal((n, 4)) + 5 * np.sin(2 * np.pi * 6 * t)[:, None]
        if k == 0:
            fw.write_edf(stem + ".edf", LABELS, ["uV"] * 4, [-3276.8] * 4, [3276.7] * 4, [-32768] * 4, [32767] * 4,
                         np.round(x / 0.1).astype(int), FS, 1)
            writers[sub] = (stem + ".edf", mne.io.read_raw_edf)
        elif k == 1:
            fw.write_brainvision(stem, LABELS, [0.1] * 4, ["\u00b5V"] * 4, np.round(x / 0.1).astype(int), FS)
            writers[sub] = (stem + ".vhdr", mne.io.read_raw_brainvision)
        else:
            fw.write_edf(stem + ".bdf", LABELS, ["uV"] * 4, [-262144] * 4, [262143] * 4, [-8388608] * 4,
                         [8388607] * 4, np.round(x / 0.03125).astype(int), FS, 1, bdf=True)
            writers[sub] = (stem + ".bdf", mne.io.read_raw_bdf)
        rows = ["onset\tduration\ttrial_type\tresponse_time\tcorrect"]
        for j in range(40):
            side, diff = ("left", "right")[j % 2], ("easy", "hard")[(j // 2) % 2]
            rt = 0.35 + 0.6 * rng.random() + (0.2 if diff == "hard" else 0)
            rows.append(f"{2 + 1.3 * j:.4f}\t0\t{side}/{diff}\t{rt:.4f}\t{int(rng.random() < 0.8)}")
        open(os.path.join(d, f"sub-{sub}_task-dots_events.tsv"), "w").write("\n".join(rows) + "\n")
        open(os.path.join(d, f"sub-{sub}_task-dots_channels.tsv"), "w").write(
            "name\ttype\tunits\tstatus\tstatus_description\n" + "".join(
                f"{c}\tEEG\tuV\t{'bad' if c == 'T7' else 'good'}\t{'loose electrode' if c == 'T7' else 'n/a'}\n"
                for c in LABELS))
    open(os.path.join(root, "participants.tsv"), "w").write(
        "participant_id\tage\tgroup\nsub-01\t23\tA\nsub-02\t31\tB\nsub-03\t27\tA\n")
    open(os.path.join(root, "dataset_description.json"), "w").write('{"Name": "test", "BIDSVersion": "1.9.0"}')
    return writers


def study(channels=("Cz",)):
    return {"bids": {"root": ".", "task": "dots"},
            "trials": {"rt": "response_time", "response": "correct", "upper": ["1"],
                       "split": {"trial_type": ["side", "difficulty"]}},
            "recordings": {"channels": list(channels), "unit": "uV"},
            "power": {"window": {"from": -1.0, "to": 0.0}, "segment": 0.5, "bands": {"theta": [4, 8]},
                      "scale": "log10", "standardize": "participant"},
            "models": [{"name": "base", "drift": {"per": ["difficulty"]}},
                       {"name": "theta", "extends": "base", "threshold": {"slopes": {"theta": []}}}],
            "output": "results"}


def run(root, st, cmd="run"):
    json.dump(st, open(os.path.join(root, "study.json"), "w"))
    return subprocess.run([bandlink, cmd, os.path.join(root, "study.json"), "--quiet"], capture_output=True,
                          text=True)


with tempfile.TemporaryDirectory() as tmp:
    root = os.path.join(tmp, "ds")
    os.makedirs(root)
    writers = make_tree(root)
    r = run(root, study())
    check("bandlink run from the bids block alone", r.returncode == 0, r.stderr.strip()[:300])
    pc = os.path.join(root, "results", "power.csv")
    rows = list(csv.DictReader(open(pc))) if os.path.exists(pc) else []
    check("120 trials from 3 events files", len(rows) == 120, f"{len(rows)} rows")
    if rows:
        check("participant from the path, participants.tsv joined, trial_type split",
              {r_["participant"] for r_ in rows} == {"01", "02", "03"} and
              all(r_["age"] == {"01": "23", "02": "31", "03": "27"}[r_["participant"]] for r_ in rows) and
              all(r_["side"] + "/" + r_["difficulty"] == r_["trial_type"] for r_ in rows),
              f"columns {list(rows[0])[:14]}")
        worst = 0.0
        for sub, (path, reader) in writers.items():
            x = reader(path, preload=True).get_data()[1] * 1e6  # Cz in uV
            mine = [r_ for r_ in rows if r_["participant"] == sub]
            for r_ in mine:
                s = rnd(float(r_["onset"]) * FS)
                f, p = welch(x[s - FS:s], fs=FS, window="hann", nperseg=128, noverlap=64)
                sel = (f >= 4 - 1e-9) & (f <= 8 + 1e-9)
                ref = (f[1] - f[0]) * p[sel].sum()
                worst = max(worst, abs(float(r_["theta_power"]) - ref) / ref)
        check("band power of EDF, BrainVision and BDF trials equals mne + scipy.signal.welch", worst <= 1e-10,
              f"worst relative difference {worst:.2e}")
        prov = os.path.join(root, "results", "provenance.json")
        if os.path.exists(prov):
            rec = json.load(open(prov))
            again = os.path.join(tmp, "again.json")
            json.dump(dict(rec["study"], output=os.path.join(tmp, "again")), open(again, "w"))
            r2 = subprocess.run([bandlink, "check", again], capture_output=True, text=True)
            check("the recorded study (with its bids block) parses and checks again", r2.returncode == 0 and
                  "bids" in rec["study"] and len(rec["inputs"]) == 1 + 3 + 3, r2.stderr.strip()[:200])
        else:
            check("provenance.json written", False)
    shutil.rmtree(os.path.join(root, "results"), ignore_errors=True)

    r = run(root, study(("Cz", "T7")))
    check("a channel marked bad in channels.tsv is refused when named",
          r.returncode == 2 and "T7" in r.stderr and "_channels.tsv" in r.stderr and "bad" in r.stderr and
          not os.path.exists(os.path.join(root, "results")), r.stderr.strip()[:250])

    ev = os.path.join(root, "sub-02", "eeg", "sub-02_task-dots_events.tsv")
    good = open(ev).read()
    open(ev, "w").write("\n".join("\t".join(line.split("\t")[1:]) for line in good.splitlines()) + "\n")
    r = run(root, study())
    check("an events file without onset is exit 2 naming it", r.returncode == 2 and "sub-02_task-dots_events.tsv"
          in r.stderr and "onset" in r.stderr and not os.path.exists(os.path.join(root, "results")),
          r.stderr.strip()[:250])
    open(ev, "w").write(good.replace("left/easy", "left-easy", 1))
    r = run(root, study())
    check("a trial_type that does not split is exit 2 naming file, line and value",
          r.returncode == 2 and "sub-02_task-dots_events.tsv:2" in r.stderr and "left-easy" in r.stderr and
          not os.path.exists(os.path.join(root, "results")), r.stderr.strip()[:250])

    # trials.file with placeholders (each value becomes a column) and recordings "<name>.*" mixing formats
    pat = os.path.join(tmp, "pat")
    for sub in ("01", "02", "03"):
        d = os.path.join(pat, "data", f"s{sub}", "day1")
        os.makedirs(d)
        src = os.path.join(root, f"sub-{sub}", "eeg")
        for f in os.listdir(src):
            if "_eeg." in f:
                ext = f.split(".")[-1]
                body = open(os.path.join(src, f), "rb").read()
                if ext == "vhdr":
                    body = body.replace(b"sub-02_task-dots_eeg.", b"rec.")
                open(os.path.join(d, "rec." + ext), "wb").write(body)
        open(os.path.join(d, "trials.csv"), "w").write(
            "onset,rt,correct\n" + "".join(f"{3 + 1.5 * j},{0.4 + 0.01 * j},{j % 2}\n" for j in range(20)))
    st = {"trials": {"file": "data/s{animal}/{day}/trials.csv", "participant": "animal", "rt": "rt",
                     "response": "correct", "upper": ["1"]},
          "recordings": {"file": "data/s{animal}/{day}/rec.*", "onset": "onset", "channels": ["Cz-Pz"],
                         "unit": "uV"},
          "power": {"window": {"from": -1.0, "to": 0.0}, "bands": {"theta": [4, 8]}}, "output": "out"}
    r = run(pat, st, "power")
    rows = list(csv.DictReader(open(os.path.join(pat, "out", "power.csv")))) if r.returncode == 0 else []
    check("trials.file placeholders: 3 files read, {animal} and {day} become columns, rec.* finds EDF/.vhdr/BDF",
          len(rows) == 60 and {x["animal"] for x in rows} == {"01", "02", "03"} and
          {x["day"] for x in rows} == {"day1"}, r.stderr.strip()[:250] or f"{len(rows)} rows")
    open(os.path.join(pat, "data", "s01", "day1", "rec.wav"), "wb").write(b"RIFF")
    shutil.rmtree(os.path.join(pat, "out"), ignore_errors=True)
    r = run(pat, st, "power")
    check("rec.* matching two recordings is exit 2 naming both", r.returncode == 2 and "rec.edf" in r.stderr and
          "rec.wav" in r.stderr and not os.path.exists(os.path.join(pat, "out")), r.stderr.strip()[:250])
print(f"{passed} checks passed, {failed} failed")
sys.exit(1 if failed else 0)
