#!/usr/bin/python3
"""Writes the small invented example study used by docs/cli.md: two rats, 24 trials each, a 2-channel
LFP at 1000 Hz stored as 16-bit FLAC. Re-running it reproduces the committed files (fixed seed)."""
import numpy as np
import soundfile as sf

rng = np.random.default_rng(20261202)
fs = 1000
rows = ["rat,trial,onset,rt,correct,difficulty,context"]
for rat in ("r1", "r2"):
    dur = 40.0
    n = int(dur * fs)
    t = np.arange(n) / fs
    common = 0.02 * rng.standard_normal(n)            # shared by both contacts: removed by "1-2"
    ch1 = common + 0.01 * rng.standard_normal(n)
    ch2 = common + 0.01 * rng.standard_normal(n)
    for k in range(24):
        onset = 1.0 + 1.6 * k
        amp = 0.004 + 0.006 * rng.random()            # pre-tone theta amplitude varies by trial
        i0, i1 = int((onset - 0.5) * fs), int(onset * fs)
        ch1[i0:i1] += amp * np.sin(2 * np.pi * 6.0 * t[i0:i1])
        rt = 0.35 + 0.6 * rng.random()
        correct = int(rng.random() < 0.8)
        diff = ("easy", "medium", "hard")[k % 3]
        ctx = ("rich", "lean")[(k // 3) % 2]
        rows.append(f"{rat},{k + 1},{onset:.3f},{rt:.3f},{correct},{diff},{ctx}")
    sf.write(f"recordings/{rat}.flac", np.column_stack([ch1, ch2]), fs, subtype="PCM_16")
open("trials.csv", "w").write("\n".join(rows) + "\n")
