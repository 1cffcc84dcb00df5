#!/usr/bin/python3
"""`bandlink check` breaks exclusions down per participant and recording and names a likely scale/unit
problem: three EDF recordings (Kemp et al. 1992 layout, via format_writers.py) hold the same kind of signal,
but one header declares "mV" for values recorded in uV, so after conversion to the study's uV its windows
are 1000x larger and fail the peak-to-peak limit. Expected: that recording's line shows most trials flagged,
the "!" diagnosis names it, the values seen and "10^3", and the two good recordings are not diagnosed.
The expected numbers come from the construction (not from bandlink). Exit 77 without numpy.
usage: check_breakdown.py BANDLINK"""
import json
import os
import subprocess
import sys
import tempfile

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
try:
    import numpy as np
except ImportError:
    print("numpy not installed: skipped")
    sys.exit(77)
import format_writers as fw

bandlink = sys.argv[1]
rng = np.random.default_rng(4)
failed = passed = 0


def check(name, ok, detail=""):
    global failed, passed
    passed += bool(ok)
    failed += not ok
    print(f"{'PASS' if ok else 'FAIL'}: {name}{': ' + detail if detail else ''}")


with tempfile.TemporaryDirectory() as d:
    rows = ["participant,onset,rt,correct"]
    for p, unit in (("p1", "uV"), ("p2", "mV"), ("p3", "uV")):
        x = 10 * rng.standard_normal((256 * 40, 2))  # ~60 uV peak-to-peak per 1 s window
        fw.write_edf(os.path.join(d, p + ".edf"), ["Fz", "Cz"], [unit] * 2, [-3276.8] * 2, [3276.7] * 2,
                     [-32768] * 2, [32767] * 2, np.round(x / 0.1).astype(int), 256, 1)
        rows += [f"{p},{2 + 1.5 * k},0.5,1" for k in range(20)]
    open(os.path.join(d, "trials.csv"), "w").write("\n".join(rows) + "\n")
    json.dump({"trials": {"file": "trials.csv", "participant": "participant", "rt": "rt", "response": "correct",
                          "upper": ["1"]},
               "recordings": {"file": "{participant}.edf", "onset": "onset", "unit": "uV", "channels": ["Cz"]},
               "power": {"window": {"from": -1, "to": 0}, "bands": {"theta": [4, 8]},
                         "artifacts": {"peak_to_peak": 200}}},
              open(os.path.join(d, "study.json"), "w"))
    r = subprocess.run([bandlink, "check", os.path.join(d, "study.json")], capture_output=True, text=True)
    out = r.stdout + r.stderr
    check("check runs", r.returncode == 0, r.stderr.strip()[:200])
    check("per participant: p2 has 20 trials, 0 kept, all flagged for peak-to-peak",
          "p2: 20 trials, 0 kept; artifact: peak-to-peak 20" in out)
    check("per recording: p1.edf 20 windowed, 0 flagged; p2.edf 20 windowed, 20 flagged",
          "p1.edf: 20 windowed, 0 flagged" in out and "p2.edf: 20 windowed, 20 flagged" in out)
    diag = [line for line in out.splitlines() if line.startswith("  ! ")]
    check("one diagnosis, naming p2.edf, the values seen and the limit",
          len(diag) == 1 and "p2.edf" in diag[0] and "20 of 20" in diag[0] and "limit 200 uV" in diag[0] and
          "other recordings median" in diag[0], diag[0][:200] if diag else out[-300:])
    check("the diagnosis names a scale/unit problem of about 10^3 (mV vs uV)",
          "scale/unit" in out and "10^3" in out and "mV and uV" in out)

    # clipping at EDF's digital extremes (Kemp et al. 1992: dmin/dmax are the converter's range; a sample at
    # them is saturated, common practice in artifact rejection): trials 1-3 of p1 touch dmax on Cz only,
    # trial 4 touches dmin on Fz, which the study does not use
    x = np.round(10 * rng.standard_normal((256 * 40, 2)) / 0.1).astype(int)
    for k in range(3):
        x[int((2 + 1.5 * k - 0.5) * 256), 1] = 32767
    x[int((2 + 1.5 * 3 - 0.5) * 256), 0] = -32768
    fw.write_edf(os.path.join(d, "p1.edf"), ["Fz", "Cz"], ["uV"] * 2, [-3276.8] * 2, [3276.7] * 2, [-32768] * 2,
                 [32767] * 2, x, 256, 1)
    st = json.load(open(os.path.join(d, "study.json")))
    st["power"]["artifacts"] = {"clipping": True}
    json.dump(st, open(os.path.join(d, "study.json"), "w"))
    r = subprocess.run([bandlink, "check", os.path.join(d, "study.json")], capture_output=True, text=True)
    check("EDF samples at the digital maximum of a used channel are clipping; the unused channel is not",
          r.returncode == 0 and "p1: 20 trials, 17 kept; artifact: clipping 3" in r.stdout and
          "p1.edf: 20 windowed, 3 flagged" in r.stdout and "no integer full scale" not in r.stderr,
          r.stdout[r.stdout.find("by participant"):][:200] + r.stderr[:200])
print(f"{passed} checks passed, {failed} failed")
sys.exit(1 if failed else 0)
