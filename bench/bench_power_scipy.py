#!/usr/bin/python3
"""scipy side of bench_power: the same band power computed in Python on the same FLAC files.
Prints timings and a RESULT line: seconds for (1) the same pipeline per trial (soundfile read of the
window + montage + scipy.signal.welch + band sums), (2) scipy.signal.welch alone per trial on in-memory
windows, (3) scipy.signal.welch alone vectorised over all windows; and the worst relative difference of
the theta band power to bandlink's.
usage: bench_power_scipy.py DIR PARTICIPANTS TRIALS"""
import csv
import math
import sys
import time

import numpy as np
import soundfile as sf
from scipy.signal import welch

d, npart, ntr = sys.argv[1], int(sys.argv[2]), int(sys.argv[3])
fs, L, nper, nover = 2000, 2000, 1000, 500
bands = {"theta": (4, 10), "alpha": (8, 13), "beta": (15, 30), "gamma": (30, 80)}
rows = list(csv.DictReader(open(f"{d}/trials.csv")))


def start(onset):
    s = int(math.floor(onset * fs + 0.5))
    return s - fs  # window [s - 1 s, s)


def band_sums(f, p):
    df = f[1] - f[0]
    return {b: df * p[..., (f >= lo) & (f <= hi) & (f > 0)].sum(axis=-1) for b, (lo, hi) in bands.items()}


# (1) the same pipeline per trial
t0 = time.perf_counter()
theta = []
files = {}
for r in rows:
    a = r["animal"]
    if a not in files:
        files[a] = sf.SoundFile(f"{d}/{a}.flac")
    h = files[a]
    h.seek(start(float(r["onset"])))
    x = h.read(L, dtype="float64", always_2d=True)
    sig = 1000.0 * ((x[:, 0] - x[:, 1]) + (x[:, 2] - x[:, 3])) / 2
    f, p = welch(sig, fs=fs, window="hann", nperseg=nper, noverlap=nover)
    bs = band_sums(f, p)
    theta.append(bs["theta"])
t_full = time.perf_counter() - t0
for h in files.values():
    h.close()

# in-memory windows for the welch-only timings
wins = np.empty((len(rows), L))
data = {a: sf.read(f"{d}/{a}.flac", dtype="float64", always_2d=True)[0] for a in sorted({r["animal"] for r in rows})}
for i, r in enumerate(rows):
    s = start(float(r["onset"]))
    x = data[r["animal"]][s:s + L]
    wins[i] = 1000.0 * ((x[:, 0] - x[:, 1]) + (x[:, 2] - x[:, 3])) / 2
t0 = time.perf_counter()
for i in range(len(rows)):
    f, p = welch(wins[i], fs=fs, window="hann", nperseg=nper, noverlap=nover)
    band_sums(f, p)
t_loop = time.perf_counter() - t0
t0 = time.perf_counter()
f, p = welch(wins, fs=fs, window="hann", nperseg=nper, noverlap=nover, axis=-1)
band_sums(f, p)
t_vec = time.perf_counter() - t0

n = len(rows)
ours = np.fromfile(f"{d}/bandlink_theta.f64", dtype="<f8")
maxrel = float(np.max(np.abs(ours - np.array(theta)) / np.array(theta)))
print(f"scipy     same pipeline per trial (soundfile + welch): {t_full:8.3f} s  {n / t_full:9.0f} trials/s")
print(f"scipy     welch alone, per trial, in memory:           {t_loop:8.3f} s  {n / t_loop:9.0f} trials/s")
print(f"scipy     welch alone, vectorised, in memory:          {t_vec:8.3f} s  {n / t_vec:9.0f} trials/s")
print(f"RESULT {t_full!r} {t_loop!r} {t_vec!r} {maxrel!r}")
