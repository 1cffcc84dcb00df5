#!/usr/bin/python3
"""Live check of bandlink's Welch PSD against scipy.signal.welch on the same arrays (exit 77 = skipped
when scipy is missing). Covers the fixture cases plus 60 random configurations: window lengths, odd,
even and prime nperseg, overlaps from 0 to 90 %, zero padding, constant/linear/no detrending, mean and
median averaging, density and spectrum scaling. Criterion: |C - P| <= 1e-10 |P| + 1e-12 max(P).
usage: welch_live.py WELCH_TOOL"""
import os
import subprocess
import sys
import tempfile

try:
    import numpy as np
    from scipy.signal import welch
except ImportError:
    print("scipy/numpy not installed: skipped")
    sys.exit(77)

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from welch_cases import CASES, signal  # noqa: E402

tool = sys.argv[1]
rng = np.random.default_rng(7)
cases = list(CASES)
for k in range(60):
    nperseg = int(rng.choice([64, 97, 100, 128, 131, 250, 256, 257, 331, 400, 500, 512]))
    n = int(nperseg + rng.integers(0, 6 * nperseg))
    noverlap = int(rng.integers(0, int(0.9 * nperseg) + 1))
    nfft = nperseg + int(rng.choice([0, 0, 0, 7, nperseg]))
    detrend = str(rng.choice(["constant", "linear", "none"]))
    average = str(rng.choice(["mean", "mean", "median"]))
    scaling = str(rng.choice(["density", "density", "spectrum"]))
    fs = float(rng.choice([250.0, 500.0, 1000.0, 1024.0, 2000.0, 30000.0]))
    cases.append((f"random{k}", n, fs, nperseg, noverlap, nfft, detrend, average, scaling, 100 + k))

failed = 0
worst = 0.0
with tempfile.TemporaryDirectory() as tmp:
    for case in cases:
        name, n, fs, nperseg, noverlap, nfft, detrend, average, scaling, seed = case
        x = signal(n, fs, seed)
        xin, pout = os.path.join(tmp, "x.f64"), os.path.join(tmp, "p.f64")
        x.astype("<f8").tofile(xin)
        subprocess.run([tool, xin, repr(fs), str(nperseg), str(noverlap), str(nfft), detrend, average, scaling, pout],
                       check=True)
        got = np.fromfile(pout, dtype="<f8")
        _, want = welch(x, fs=fs, window="hann", nperseg=nperseg, noverlap=noverlap, nfft=nfft,
                        detrend=False if detrend == "none" else detrend, scaling=scaling, average=average)
        ok = got.shape == want.shape and np.all(np.abs(got - want) <= 1e-10 * np.abs(want) + 1e-12 * want.max())
        big = want > 1e-6 * want.max()
        rel = float(np.max(np.abs(got[big] - want[big]) / want[big])) if got.shape == want.shape else float("inf")
        worst = max(worst, rel)
        print(f"{'PASS' if ok else 'FAIL'}: {name}: n={n} fs={fs} nperseg={nperseg} noverlap={noverlap} nfft={nfft} "
              f"{detrend} {average} {scaling}: worst relative {rel:.2e}")
        failed += not ok
print(f"{len(cases) - failed} checks passed, {failed} failed (worst relative difference {worst:.2e})")
sys.exit(1 if failed else 0)
