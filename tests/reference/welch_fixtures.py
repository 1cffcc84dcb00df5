#!/usr/bin/python3
"""Writes tests/fixtures/welch/: for each case in welch_cases.py the input (NAME.x.f64) and
scipy.signal.welch's PSD (NAME.psd.f64), raw little-endian float64, plus cases.txt. Run by hand when the
cases change; the committed files let test_spectrum check against scipy where scipy is not installed."""
import os
import sys

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from welch_cases import CASES, reference, signal  # noqa: E402

out = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "fixtures", "welch")
os.makedirs(out, exist_ok=True)
import scipy  # noqa: E402
with open(os.path.join(out, "cases.txt"), "w") as f:
    f.write(f"# scipy {scipy.__version__}, numpy {np.__version__}: name n fs nperseg noverlap nfft detrend average scaling\n")
    for case in CASES:
        name, n, fs, nperseg, noverlap, nfft, detrend, average, scaling, seed = case
        x = signal(n, fs, seed)
        _, p = reference(x, case)
        x.astype("<f8").tofile(os.path.join(out, name + ".x.f64"))
        p.astype("<f8").tofile(os.path.join(out, name + ".psd.f64"))
        f.write(f"{name} {n} {fs!r} {nperseg} {noverlap} {nfft} {detrend} {average} {scaling}\n")
