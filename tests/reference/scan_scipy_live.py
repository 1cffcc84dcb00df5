#!/usr/bin/python3
"""Live check of the scan's tapers and cell power against python3-scipy on the same samples.
1. Slepian tapers: scan_tool dpss N NW K against scipy.signal.windows.dpss(N, NW, K) (L2-normalised,
   the same sign convention), for several N, NW, K.
2. Cell power: a generated study with CSV traces (values read as written); for every kept trial and cell,
   the window [a + round(from_w fs), + N) with a = round(onset fs) (+ rt when aligned to the response),
   detrended as the study says (scipy.signal.detrend), tapered by scipy's dpss with NW = N bw / 2 / fs,
   K = max(1, floor(2 NW) - 1), and power = 2 / (K fs) sum_k |sum_t h_k x e^{-2 pi i f t / fs}|^2 (numpy).
Exit 77 (skipped) without numpy/scipy.
usage: scan_scipy_live.py SCAN_TOOL"""
import json
import math
import os
import subprocess
import sys
import tempfile

try:
    import numpy as np
    from scipy.signal import detrend
    from scipy.signal.windows import dpss
except ImportError:
    print("numpy/scipy not installed: skipped")
    sys.exit(77)

tool = sys.argv[1]
failed = 0


def check(ok, what):
    global failed
    print(("PASS: " if ok else "FAIL: ") + what)
    failed += 0 if ok else 1


def rnd(x):
    """round half away from zero (C llround)"""
    return int(math.floor(abs(x) + 0.5)) * (1 if x >= 0 else -1)


for N, NW, K in [(64, 2.0, 3), (250, 2.5, 4), (501, 4.0, 7), (100, 1.0, 1), (128, 3.5, 6)]:
    out = subprocess.run([tool, "dpss", str(N), str(NW), str(K)], capture_output=True, text=True, check=True).stdout
    got = np.array([[float(v) for v in line.split()] for line in out.strip().split("\n")])
    want = dpss(N, NW, K)
    if K == 1:
        want = want.reshape(1, -1)
    err = np.max(np.abs(got - want))
    check(err < 1e-9, f"dpss N={N} NW={NW} K={K}: max |C - scipy| = {err:.2e}")

rng = np.random.default_rng(12)
for case, (align, det, frac) in enumerate([("onset", "mean", None), ("response", "linear", 0.8), ("onset", "none", None)]):
    with tempfile.TemporaryDirectory() as tmp:
        fs = 250.0
        rows = ["p,trial,onset,rt,correct"]
        data = {}
        for p in ("a", "b"):
            n = int(fs * 30)
            tt = np.arange(n) / fs
            x = rng.standard_normal((n, 2)) + np.sin(2 * np.pi * 9.3 * tt)[:, None] * 0.7
            x[:, 1] += 0.4 * tt[:]
            np.savetxt(os.path.join(tmp, p + ".csv"), x, delimiter=",", header="c1,c2", comments="", fmt="%.17g")
            data[p] = x
            for i in range(6):
                rows.append(f"{p},{i + 1},{2.0 + 3.7 * i + rng.uniform(0, 0.01):.6f},{rng.uniform(0.3, 0.9):.4f},{i % 2}")
        open(os.path.join(tmp, "trials.csv"), "w").write("\n".join(rows) + "\n")
        freqs = {"from": 5, "to": 40, "count": 6, "spacing": "log"}
        if frac:
            freqs["bandwidth_fraction"] = frac
        else:
            freqs["bandwidth"] = 6
        study = {
            "trials": {"file": "trials.csv", "participant": "p", "rt": "rt", "response": "correct", "upper": ["1"]},
            "recordings": {"file": "{p}.csv", "onset": "onset", "rate": fs, "unit": "uV", "channels": ["1-2"],
                           "gain": 2.0},
            "power": {"window": {"align": "onset", "from": -0.5, "to": 0}, "segment": 0.5, "detrend": det,
                      "bands": {"alpha": [8, 12]}, "scale": "log10", "standardize": "participant"},
            "models": [{"name": "base"}],
            "scan": {"frequencies": freqs,
                     "windows": {"align": align, "from": -0.8, "to": 0.6, "length": 0.6, "step": 0.2},
                     "parameters": ["threshold"]},
        }
        json.dump(study, open(os.path.join(tmp, "study.json"), "w"))
        out = subprocess.run([tool, "power", os.path.join(tmp, "study.json")], capture_output=True, text=True)
        if out.returncode != 0:
            check(False, f"case {case}: scan_tool power failed: {out.stderr.strip()}")
            continue
        lines = out.stdout.strip().split("\n")
        fs_got, N = float(lines[0].split()[0]), int(lines[0].split()[1])
        got = np.array([[float(v) for v in line.split()] for line in lines[1:]])
        sc = study["scan"]
        nf, wfrom = sc["frequencies"]["count"], []
        w0 = sc["windows"]["from"]
        while w0 + sc["windows"]["length"] <= sc["windows"]["to"] + 1e-9:
            wfrom.append(w0)
            w0 += sc["windows"]["step"]
        fr = [5 * (40 / 5) ** (i / (nf - 1)) for i in range(nf)]
        want = []
        for r in rows[1:]:
            p, _, onset, rt, _ = r.split(",")
            a = float(onset) + (float(rt) if align == "response" else 0)
            sig = 2.0 * (data[p][:, 0] - data[p][:, 1])
            first = rnd(wfrom[0] * fs)
            base = rnd(a * fs) + first
            cells = []
            for f in fr:
                bw = frac * f if frac else 6
                NW = N * bw / 2 / fs
                K = max(1, int(math.floor(2 * NW + 1e-9)) - 1)
                tap = dpss(N, NW, K).reshape(K, N)
                ph = np.exp(-2j * np.pi * f * np.arange(N) / fs)
                row = []
                for wf in wfrom:
                    s0 = base + rnd(wf * fs) - first
                    seg = sig[s0:s0 + N]
                    seg = detrend(seg, type="constant" if det == "mean" else "linear") if det != "none" else seg
                    row.append(2.0 / (K * fs) * np.sum(np.abs((tap * seg) @ ph) ** 2))
                cells.append(row)
            want.append(np.array(cells).reshape(-1))
        want = np.array(want)
        rel = np.max(np.abs(got - want) / np.abs(want))
        check(got.shape == want.shape and rel < 1e-9,
              f"case {case} ({align}, detrend {det}, {'fraction' if frac else 'fixed'} bandwidth): "
              f"{got.size} cell powers, max relative difference {rel:.2e}")

print(f"{failed} failed")
sys.exit(1 if failed else 0)
