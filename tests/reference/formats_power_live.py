#!/usr/bin/python3
"""End-to-end live check: `bandlink power` on studies whose recordings are EDF, BDF, BrainVision and NWB files
(written by format_writers.py from the published specifications), channels chosen by name, against
python3-mne reading the same files (volts, scaled to the study's unit) + scipy.signal.welch + numpy:
window [s + round(from fs), s + round(to fs)), s = round(onset fs); band power = df * sum of PSD bins with
lo <= f <= hi, f > 0; "average": "signal" = Welch of the mean of the entries, "average": "power" = mean of each
entry's band power. NWB samples come from h5py (data * conversion + offset, NWB 2.x schema), as MNE does not
read NWB. Exit 77 (skipped) without mne/h5py/scipy.
usage: formats_power_live.py BANDLINK"""
import csv
import json
import math
import os
import subprocess
import sys
import tempfile
import warnings

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
try:
    import numpy as np
    import mne
    import h5py  # noqa: F401
    from scipy.signal import welch
except ImportError:
    print("mne/h5py/scipy not installed: skipped")
    sys.exit(77)
import format_writers as fw

mne.set_log_level("ERROR")
warnings.simplefilter("ignore")
bandlink = sys.argv[1]
rng = np.random.default_rng(5)
failed = passed = 0
UNIT = {"uV": 1e6, "V": 1.0, "mV": 1e3}


def rnd(x):
    """round half away from zero (C llround), the window convention"""
    return int(math.floor(abs(x) + 0.5)) * (1 if x >= 0 else -1)


def signal(fs, seconds, channels, scale):
    n = int(fs * seconds)
    t = np.arange(n) / fs
    x = rng.standard_normal((n, channels)) + np.sin(2 * np.pi * 6.5 * t)[:, None] * np.linspace(0.5, 2, channels)
    x[:, 0] += 0.7 * np.sin(2 * np.pi * 22.0 * t)
    return x * scale


def run_case(tmp, name, ext, write, read_volts, channels, unit, average, fs, series=None):
    """write(path) writes one participant's file; read_volts(path) -> (names, volts[ch, n])."""
    global failed, passed
    d = os.path.join(tmp, name)
    os.makedirs(d)
    rows = ["participant,trial,onset,rt,correct"]
    onsets = {}
    for p in ("p1", "p2"):
        write(os.path.join(d, p + "." + ext))
        onsets[p] = [1.5 + 1.1 * k + 0.01 * rng.random() for k in range(15)]
        for k, o in enumerate(onsets[p]):
            rows.append(f"{p},{k + 1},{o!r},{0.3 + 0.4 * rng.random():.4f},{int(rng.random() < 0.7)}")
    open(os.path.join(d, "trials.csv"), "w").write("\n".join(rows) + "\n")
    settings = {"window": {"from": -1.0, "to": 0.0}, "segment": 0.5, "overlap": 0.5,
                "bands": {"theta": [4, 9], "beta": [15, 30]}, "scale": "linear", "standardize": "none"}
    study = {"trials": {"file": "trials.csv", "participant": "participant", "rt": "rt", "response": "correct",
                        "upper": ["1"]},
             "recordings": {"file": "{participant}." + ext, "onset": "onset", "unit": unit, "channels": channels,
                            "average": average, **({"series": series} if series else {})},
             "power": settings, "output": "out"}
    json.dump(study, open(os.path.join(d, "study.json"), "w"))
    r = subprocess.run([bandlink, "power", os.path.join(d, "study.json"), "--quiet"], capture_output=True, text=True)
    if r.returncode != 0:
        print(f"FAIL: {name}: bandlink power exited {r.returncode}: {r.stderr.strip()}")
        failed += 1
        return
    got = list(csv.DictReader(open(os.path.join(d, "out", "power.csv"))))
    worst = 0.0
    nper, nover = rnd(0.5 * fs), rnd(0.25 * fs)
    for p in ("p1", "p2"):
        names, volts = read_volts(os.path.join(d, p + "." + ext))
        x = volts * UNIT[unit]
        entries = []
        for spec in channels:
            if spec in names:
                entries.append(x[names.index(spec)])
            else:
                a, b = spec.split("-")
                entries.append(x[names.index(a)] - x[names.index(b)])
        for k, o in enumerate(onsets[p]):
            s = rnd(o * fs)
            lo_i, hi_i = s + rnd(-1.0 * fs), s
            if average == "signal":
                segs = [np.mean(entries, axis=0)[lo_i:hi_i]]
            else:
                segs = [e[lo_i:hi_i] for e in entries]
            row = next(q for q in got if q["participant"] == p and q["trial"] == str(k + 1))
            for band, (lo, hi) in settings["bands"].items():
                bps = []
                for seg in segs:
                    f, pxx = welch(seg, fs=fs, window="hann", nperseg=nper, noverlap=nover, detrend="constant")
                    sel = (f >= lo - 1e-9) & (f <= hi + 1e-9) & (f > 0)
                    bps.append((f[1] - f[0]) * pxx[sel].sum())
                ref = float(np.mean(bps))
                worst = max(worst, abs(float(row[band + "_power"]) - ref) / ref)
    ok = worst <= 1e-10
    passed += ok
    failed += not ok
    print(f"{'PASS' if ok else 'FAIL'}: {name}: band power of 30 trials ({', '.join(channels)}, average {average}, "
          f"unit {unit}) matches mne + scipy.signal.welch (worst relative difference {worst:.2e}, limit 1e-10)")


def mne_reader(fn):
    def read(path):
        raw = fn(path, preload=True)
        return raw.ch_names, raw.get_data()
    return read


with tempfile.TemporaryDirectory() as tmp:
    # EDF (Kemp et al. 1992), 256 Hz, uV
    def w_edf(path):
        x = signal(256, 20, 3, 20.0)
        dig = np.clip(np.round(x / 0.1), -32768, 32767).astype(int)
        fw.write_edf(path, ["Fz", "Cz", "Pz"], ["uV"] * 3, [-3276.8] * 3, [3276.7] * 3, [-32768] * 3, [32767] * 3,
                     dig, 256, 1)
    run_case(tmp, "edf_names_signal", "edf", w_edf, mne_reader(mne.io.read_raw_edf), ["Cz", "Fz-Pz"], "uV", "signal",
             256)
    # BDF (BioSemi 24-bit), 512 Hz, average power, converted to mV
    def w_bdf(path):
        x = signal(512, 20, 3, 30.0)
        dig = np.round(x / 0.03125).astype(int)
        fw.write_edf(path, ["Fz", "Cz", "Pz"], ["uV"] * 3, [-262144] * 3, [262143] * 3, [-8388608] * 3,
                     [8388607] * 3, dig, 512, 1, bdf=True)
    run_case(tmp, "bdf_average_power_mV", "bdf", w_bdf, mne_reader(mne.io.read_raw_bdf), ["Fz-Cz", "Pz"], "mV",
             "power", 512)
    # BrainVision INT_16, resolution 0.1 uV, to volts
    def w_bv(path):
        x = signal(500, 20, 4, 15.0)
        fw.write_brainvision(path[:-5], ["Fp1", "Fz", "Cz", "Pz"], [0.1] * 4, ["\u00b5V"] * 4,
                             np.round(x / 0.1).astype(int), 500)
    run_case(tmp, "brainvision_volts", "vhdr", w_bv, mne_reader(mne.io.read_raw_brainvision), ["Fz-Cz", "Pz"], "V",
             "power", 500)
    # NWB 2.x via h5py, int16 with conversion, average power of a pair and a single contact
    def w_nwb(path):
        x = signal(1000, 20, 3, 2000.0)
        fw.write_nwb(path, np.round(x).astype("<i2"), fs=1000.0, labels=["LFP1", "LFP2", "LFP3"], conversion=1e-7)

    def r_nwb(path):
        with h5py.File(path, "r") as f:
            return ["LFP1", "LFP2", "LFP3"], (f["acquisition/ElectricalSeries/data"][:].astype("f8") * 1e-7).T
    run_case(tmp, "nwb_average_power", "nwb", w_nwb, r_nwb, ["LFP1-LFP2", "LFP3"], "uV", "power", 1000)

    # per-format gain with "<name>.*": p1 as 24-bit FLAC (counts of 0.1 uV, so gain 0.1 * 2^23 turns
    # libsndfile's normalised values into uV; libsndfile API: integer PCM read as double / 2^(bits-1)),
    # p2 as a CSV trace already in uV (gain 1)
    try:
        import soundfile as sf
    except ImportError:
        sf = None
    if sf is not None:
        d = os.path.join(tmp, "mixed")
        os.makedirs(d)
        fs = 500
        counts = np.round(signal(fs, 30, 2, 200.0)).astype(np.int32)
        sf.write(os.path.join(d, "p1.flac"), counts * 256, fs, subtype="PCM_24")  # 24-bit counts, left-aligned
        uv = {}
        csv_x = signal(fs, 30, 2, 20.0)
        np.savetxt(os.path.join(d, "p2.csv"), csv_x, delimiter=",", header="Fz,Cz", comments="", fmt="%.17g")
        uv["p2"] = csv_x
        back, _ = sf.read(os.path.join(d, "p1.flac"), dtype="float64", always_2d=True)
        uv["p1"] = back * 0.1 * 2 ** 23
        rows = ["participant,trial,onset,rt,correct"] + [f"{p},{k + 1},{2 + 1.2 * k},0.5,1" for p in ("p1", "p2")
                                                         for k in range(15)]
        open(os.path.join(d, "trials.csv"), "w").write("\n".join(rows) + "\n")
        json.dump({"trials": {"file": "trials.csv", "participant": "participant", "rt": "rt", "response": "correct",
                              "upper": ["1"]},
                   "recordings": {"file": "{participant}.*", "onset": "onset", "unit": "uV", "rate": fs,
                                  "channels": ["1-2"], "gain": {"flac": 0.1 * 2 ** 23, "csv": 1}},
                   "power": {"window": {"from": -1.0, "to": 0.0}, "segment": 0.5, "bands": {"theta": [4, 9]},
                             "scale": "linear", "standardize": "none"}, "output": "out"},
                  open(os.path.join(d, "study.json"), "w"))
        r = subprocess.run([bandlink, "power", os.path.join(d, "study.json"), "--quiet"], capture_output=True,
                           text=True)
        worst = math.inf
        if r.returncode == 0:
            got = list(csv.DictReader(open(os.path.join(d, "out", "power.csv"))))
            worst = 0.0
            for row in got:
                x = uv[row["participant"]]
                s_ = rnd(float(row["onset"]) * fs)
                f, pxx = welch(x[s_ - fs:s_, 0] - x[s_ - fs:s_, 1], fs=fs, nperseg=250, noverlap=125)
                sel = (f >= 4 - 1e-9) & (f <= 9 + 1e-9)
                ref = (f[1] - f[0]) * pxx[sel].sum()
                worst = max(worst, abs(float(row["theta_power"]) - ref) / ref)
        ok = worst <= 1e-10
        passed += ok
        failed += not ok
        print(f"{'PASS' if ok else 'FAIL'}: FLAC + CSV in one study through {{participant}}.* with a gain per format "
              f"matches soundfile + scipy.signal.welch (worst relative difference {worst:.2e}) {r.stderr.strip()[:200]}")
    # NWB with two series in acquisition/: recordings.series picks "lfp" (by the last part of its path)
    def w_two(path):
        fw.write_nwb(path, np.round(signal(1000, 20, 2, 3000.0)).astype("<i2"), fs=1000.0, labels=["c1", "c2"],
                     conversion=1e-7, where="acquisition/raw")
        fw.write_nwb(path, signal(1000, 20, 2, 1e-4), fs=1000.0, labels=["c1", "c2"], where="acquisition/lfp",
                     append=True)

    def r_lfp(path):
        with h5py.File(path, "r") as f:
            return ["c1", "c2"], f["acquisition/lfp/data"][:].T
    run_case(tmp, "nwb_series_choice", "nwb", w_two, r_lfp, ["c1-c2"], "uV", "signal", 1000, series="lfp")
print(f"{passed} checks passed, {failed} failed")
sys.exit(1 if failed else 0)
