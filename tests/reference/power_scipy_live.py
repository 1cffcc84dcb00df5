#!/usr/bin/python3
"""End-to-end live check: `bandlink power` on a generated study (FLAC 24-bit, WAV float, CSV trace) against
the same computation done with soundfile (the same libsndfile reader) + scipy.signal.welch + numpy:
window [s + round(from fs), s + round(to fs)), s = round(onset fs); bipolar 1-2 averaged with channel 3,
times gain; Welch with the study's settings; band power = df * sum of PSD bins with lo <= f <= hi, f > 0;
log10 and z-score within participant with the sample SD. Exit 77 (skipped) without scipy/soundfile.
usage: power_scipy_live.py BANDLINK"""
import csv
import json
import math
import os
import subprocess
import sys
import tempfile

try:
    import numpy as np
    import soundfile as sf
    from scipy.signal import welch
except ImportError:
    print("scipy/numpy/soundfile not installed: skipped")
    sys.exit(77)

bandlink = sys.argv[1]
rng = np.random.default_rng(3)
failed = 0


def rnd(x):
    """round half away from zero (C llround), the window convention"""
    return int(math.floor(abs(x) + 0.5)) * (1 if x >= 0 else -1)


def run_case(tmp, name, ext, fs, subtype, settings):
    global failed
    d = os.path.join(tmp, name)
    os.makedirs(d)
    n = int(fs * 40)
    onsets = {}
    rows = ["animal,trial,onset,rt,correct"]
    data = {}
    for a in ("a1", "a2"):
        x = 0.1 * rng.standard_normal((n, 3)) + 0.05 * np.sin(2 * np.pi * 7.3 * np.arange(n)[:, None] / fs)
        x[:, 0] += 0.02 * np.sin(2 * np.pi * 21.7 * np.arange(n) / fs)
        if ext == "csv":
            np.savetxt(os.path.join(d, a + ".csv"), x, delimiter=",", header="c1,c2,c3", comments="", fmt="%.17g")
            data[a] = x
        else:
            sf.write(os.path.join(d, a + "." + ext), x, fs, subtype=subtype)
            data[a], _ = sf.read(os.path.join(d, a + "." + ext), dtype="float64", always_2d=True)
        onsets[a] = [2.0 + 1.7 * k + 0.01 * rng.random() for k in range(20)]
        rts = [round(0.3 + 0.5 * rng.random(), 4) for k in range(20)]
        for k, o in enumerate(onsets[a]):
            rows.append(f"{a},{k + 1},{o!r},{rts[k]:.4f},{int(rng.random() < 0.7)}")
        if settings["window"].get("align") == "response":  # the window is aligned to onset + rt
            onsets[a] = [o + r for o, r in zip(onsets[a], rts)]
    open(os.path.join(d, "trials.csv"), "w").write("\n".join(rows) + "\n")
    study = {
        "trials": {"file": "trials.csv", "participant": "animal", "rt": "rt", "response": "correct", "upper": ["1"]},
        "recordings": {"file": "{animal}." + ext, "onset": "onset", "gain": 250.0, "unit": "uV",
                       "channels": ["1-2", "3"]},
        "power": dict(settings),
        "output": "out",
    }
    if ext == "csv":
        study["recordings"]["rate"] = fs
    json.dump(study, open(os.path.join(d, "study.json"), "w"))
    p = subprocess.run([bandlink, "power", os.path.join(d, "study.json"), "--quiet"], capture_output=True, text=True)
    if p.returncode != 0:
        print(f"FAIL: {name}: bandlink power exited {p.returncode}: {p.stderr.strip()}")
        failed += 1
        return
    got = list(csv.DictReader(open(os.path.join(d, "out", "power.csv"))))
    w = settings["window"]
    nper = rnd(settings["segment"] * fs)
    nover = rnd(settings["overlap"] * nper)
    det = {"mean": "constant", "linear": "linear", "none": False}[settings.get("detrend", "mean")]
    worst = 0.0
    for band, (lo, hi) in settings["bands"].items():
        raw = {}
        for a in ("a1", "a2"):
            x = data[a]
            sig = 250.0 * ((x[:, 0] - x[:, 1]) + x[:, 2]) / 2
            for k, o in enumerate(onsets[a]):
                s = rnd(o * fs)
                seg = sig[s + rnd(w["from"] * fs): s + rnd(w["to"] * fs)]
                f, pxx = welch(seg, fs=fs, window="hann", nperseg=nper, noverlap=nover, detrend=det)
                sel = (f >= lo - 1e-9 * (f[1] - f[0])) & (f <= hi + 1e-9 * (f[1] - f[0])) & (f > 0)
                raw[(a, k + 1)] = (f[1] - f[0]) * pxx[sel].sum()
        for a in ("a1", "a2"):
            v = np.log10([raw[(a, k + 1)] for k in range(20)])
            z = (v - v.mean()) / v.std(ddof=1)
            for k in range(20):
                row = next(r for r in got if r["participant"] == a and r["trial"] == str(k + 1))
                bp, zz = float(row[band + "_power"]), float(row[band])
                rel = abs(bp - raw[(a, k + 1)]) / raw[(a, k + 1)]
                worst = max(worst, rel, abs(zz - z[k]) / max(1.0, abs(z[k])))
    ok = worst <= 1e-10
    failed += not ok
    print(f"{'PASS' if ok else 'FAIL'}: {name}: band power and z-scores of 40 trials match scipy.signal.welch "
          f"(worst relative difference {worst:.2e})")


with tempfile.TemporaryDirectory() as tmp:
    base = {"window": {"from": -1.0, "to": 0.0}, "segment": 0.5, "overlap": 0.5,
            "bands": {"theta": [4, 10], "beta": [15, 30]}, "scale": "log10", "standardize": "participant"}
    run_case(tmp, "flac24", "flac", 1000, "PCM_24", base)
    run_case(tmp, "wavfloat_linear", "wav", 2000, "FLOAT",
             dict(base, window={"from": -0.75, "to": 0.25}, segment=0.3, overlap=0.25, detrend="linear"))
    run_case(tmp, "csv_nodetrend_prime", "csv", 500, None,
             dict(base, window={"from": -1.2, "to": 0.0}, segment=0.454, overlap=0.6, detrend="none"))
    run_case(tmp, "wav16_response", "wav", 1024, "PCM_16",
             dict(base, window={"align": "response", "from": -0.5, "to": 0.5}, segment=0.25, overlap=0.0))
print(f"{4 - failed} checks passed, {failed} failed")
sys.exit(1 if failed else 0)
