#!/usr/bin/python3
"""Live check of the EDF/EDF+/BDF/BrainVision/NWB readers (src/signal/trace_*.c) through tests/trace_dump:
files written by format_writers.py from the published specifications, read back by python3-mne
(mne.io.read_raw_edf / read_raw_bdf / read_raw_brainvision, data in volts) as the reference; NWB files
(which MNE does not read) are compared with h5py + numpy applying the schema's data * conversion + offset.
Samples must agree to 1e-12 relative to each channel's largest magnitude; names and rates exactly.
Exit 77 (skipped) without mne/h5py/numpy. usage: formats_mne.py TRACE_DUMP"""
import os
import subprocess
import sys
import tempfile
import warnings

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
try:
    import numpy as np
    import mne
    import h5py  # noqa: F401  (format_writers uses it)
except ImportError:
    print("mne/h5py/numpy not installed: skipped")
    sys.exit(77)
import format_writers as fw

mne.set_log_level("ERROR")
warnings.simplefilter("ignore")
dump = sys.argv[1]
rng = np.random.default_rng(11)
failed = passed = 0
SCALE = {"uV": 1e-6, "\u00b5V": 1e-6, "mV": 1e-3, "V": 1.0, "volts": 1.0}


def read_dump(path, start=None, n=None):
    args = [dump, path] + ([str(start), str(n)] if start is not None else [])
    p = subprocess.run(args, capture_output=True, text=True)
    if p.returncode != 0:
        return None, p.stderr.strip()
    meta, rows = {}, []
    names, units = [], []
    for line in p.stdout.splitlines():
        w = line.split(" ")
        if w[0] in ("rate", "channels", "frames"):
            meta[w[0]] = float(w[1])
        elif w[0] == "format":
            meta["format"] = line[7:]
        elif line.startswith("channel\t"):
            t = line.split("\t")
            names.append(t[2])
            units.append(t[3])
        else:
            rows.append([float(x) for x in w])
    meta["names"], meta["units"] = names, units
    return (meta, np.array(rows)), None


def check(name, ok, detail):
    global failed, passed
    passed += bool(ok)
    failed += not ok
    print(f"{'PASS' if ok else 'FAIL'}: {name}: {detail}")


def compare(name, path, ref_names, ref_rate, ref_volts, window=None):
    """ref_volts: (channels, frames) in volts from the reference reader."""
    got, err = read_dump(path, *(window or (None, None)))
    if got is None:
        check(name, False, f"trace_dump failed: {err}")
        return
    meta, x = got
    check(name + " names", meta["names"] == ref_names, f"{meta['names']} vs {ref_names}")
    check(name + " rate", abs(meta["rate"] - ref_rate) <= 1e-12 * ref_rate, f"{meta['rate']} vs {ref_rate} Hz")
    ref = ref_volts if window is None else ref_volts[:, window[0]:window[0] + window[1]]
    if x.shape != ref.T.shape:
        check(name + " samples", False, f"shape {x.shape} vs {ref.T.shape}")
        return
    worst = 0.0
    for c in range(x.shape[1]):
        v = x[:, c] * SCALE[meta["units"][c]]
        worst = max(worst, np.max(np.abs(v - ref[c])) / np.max(np.abs(ref[c])))
    check(name + " samples", worst <= 1e-12, f"{x.shape[0]} x {x.shape[1]} physical samples, worst relative "
          f"difference {worst:.2e} (limit 1e-12)")


with tempfile.TemporaryDirectory() as tmp:
    # EDF, Kemp et al. 1992: 3 channels at 256 Hz, 1 s records, symmetric ranges
    dig = rng.integers(-32768, 32768, size=(256 * 20, 3))
    p = os.path.join(tmp, "a.edf")
    fw.write_edf(p, ["Fz", "Cz", "Pz"], ["uV"] * 3, [-3276.8] * 3, [3276.7] * 3, [-32768] * 3, [32767] * 3, dig,
                 256, 1)
    raw = mne.io.read_raw_edf(p, preload=True)
    compare("EDF 16-bit (Kemp 1992)", p, raw.ch_names, raw.info["sfreq"], raw.get_data())
    compare("EDF window by seeking", p, raw.ch_names, raw.info["sfreq"], raw.get_data(), (1000, 777))

    # EDF+C, Kemp & Olivan 2003: annotation signal, asymmetric ranges, 0.5 s records of 250 samples (500 Hz)
    dig = rng.integers(-2000, 3001, size=(250 * 24, 2))
    p = os.path.join(tmp, "b.edf")
    fw.write_edf(p, ["EEG C3", "EEG C4"], ["uV", "mV"], [-512.5, -1.25], [1023.25, 2.5], [-2000, -2000],
                 [3000, 3000], dig, 250, 0.5, plus=True)
    raw = mne.io.read_raw_edf(p, preload=True)
    compare("EDF+C with annotations (Kemp & Olivan 2003)", p, raw.ch_names, raw.info["sfreq"], raw.get_data())

    # BDF, BioSemi 24-bit: 512 Hz, per-channel ranges
    dig = rng.integers(-8388608, 8388608, size=(512 * 10, 3))
    p = os.path.join(tmp, "c.bdf")
    fw.write_edf(p, ["Fz", "Cz", "Pz"], ["uV"] * 3, [-262144, -187500, -100], [262143, 187500, 100],
                 [-8388608] * 3, [8388607] * 3, dig, 512, 1, bdf=True)
    raw = mne.io.read_raw_bdf(p, preload=True)
    compare("BDF 24-bit (BioSemi)", p, raw.ch_names, raw.info["sfreq"], raw.get_data())
    compare("BDF window across records", p, raw.ch_names, raw.info["sfreq"], raw.get_data(), (500, 1100))

    # BrainVision exchange format 1.0: INT_16 multiplexed, INT_32 vectorized, IEEE_FLOAT_32
    for binary, vec, stored in (("INT_16", False, rng.integers(-32768, 32768, size=(5000, 4))),
                                ("INT_32", True, rng.integers(-2**31, 2**31, size=(3000, 4))),
                                ("IEEE_FLOAT_32", False, rng.standard_normal((4000, 4)) * 50)):
        stem = os.path.join(tmp, "bv_" + binary)
        fw.write_brainvision(stem, ["Fp1", "Fz", "Cz", "Pz"], [0.1, 0.5, 0.048828125, 1.0],
                             ["\u00b5V", "\u00b5V", "\u00b5V", "\u00b5V"], stored, 500, binary=binary, vectorized=vec)
        raw = mne.io.read_raw_brainvision(stem + ".vhdr", preload=True)
        compare(f"BrainVision {binary} {'vectorized' if vec else 'multiplexed'}", stem + ".vhdr", raw.ch_names,
                raw.info["sfreq"], raw.get_data())
    compare("BrainVision vectorized window", stem.replace("IEEE_FLOAT_32", "INT_32") + ".vhdr",
            ["Fp1", "Fz", "Cz", "Pz"], 500.0,
            mne.io.read_raw_brainvision(stem.replace("IEEE_FLOAT_32", "INT_32") + ".vhdr", preload=True).get_data(),
            (1234, 600))

    # NWB 2.x (schema via h5py): int16 data with conversion and offset, starting_time/rate, electrode labels
    data = rng.integers(-32768, 32768, size=(30000, 3)).astype("<i2")
    p = os.path.join(tmp, "d.nwb")
    fw.write_nwb(p, data, fs=30000.0, labels=["LFP1", "LFP2", "LFP3"], conversion=1.95e-7, offset=-2.5e-5)
    ref = (data.astype("f8") * 1.95e-7 - 2.5e-5).T
    compare("NWB acquisition/ElectricalSeries (conversion, offset)", p, ["LFP1", "LFP2", "LFP3"], 30000.0, ref)
    compare("NWB window by hyperslab", p, ["LFP1", "LFP2", "LFP3"], 30000.0, ref, (12345, 1000))
    # in a processing module's LFP container, with evenly spaced timestamps and float data
    data = rng.standard_normal((2000, 2)) * 1e-4
    p = os.path.join(tmp, "e.nwb")
    fw.write_nwb(p, data, timestamps=12.5 + np.arange(2000) / 1250.0, labels=["sh1", "sh2"],
                 where="processing/ecephys/LFP/ElectricalSeries")
    compare("NWB processing/ecephys/LFP with timestamps", p, ["sh1", "sh2"], 1250.0, data.T)

    # Events: EDF+ TALs (Kemp & Olivan 2003) and BrainVision markers against mne.read_annotations; the NWB
    # intervals/trials table against the values written with h5py
    def events(path):
        p_ = subprocess.run([dump, "--events", path], capture_output=True, text=True)
        if p_.returncode != 0:
            return None, p_.stderr.strip()
        lines = p_.stdout.splitlines()
        head = lines[0].split("\t")
        return [dict(zip(head, x.split("\t"))) for x in lines[1:]], None

    anns = [(0.5, 0, "stim/left"), (3.25, 0.5, "stim/right"), (3.75, 0, "resp"), (7.125, 1.5, "stim/left")]
    p = os.path.join(tmp, "ev.edf")
    fw.write_edf(p, ["C3", "C4"], ["uV"] * 2, [-100] * 2, [100] * 2, [-32768] * 2, [32767] * 2,
                 rng.integers(-100, 100, size=(256 * 10, 2)), 256, 1, plus=True, annotations=anns)
    ref = mne.read_annotations(p)
    got, err = events(p)
    ok = got is not None and len(got) == len(ref) and all(
        abs(float(g["onset"]) - o) <= 1e-12 and abs(float(g["duration"]) - d) <= 1e-12 and g["trial_type"] == t
        for g, o, d, t in zip(got, ref.onset, ref.duration, ref.description))
    check("EDF+ annotations as events (mne.read_annotations)", ok, f"{len(got) if got else err} of {len(ref)} "
          "annotations with equal onset, duration and text")
    stem = os.path.join(tmp, "ev_bv")
    fw.write_brainvision(stem, ["Fz"], [0.1], ["\u00b5V"], rng.integers(-100, 100, size=(5000, 1)), 500,
                         markers=[("Stimulus", "S  1", 251, 1), ("Response", "R  2", 777, 1),
                                  ("Stimulus", "S 11", 3001, 50)])
    ref = mne.read_annotations(stem + ".vmrk")
    got, err = events(stem + ".vmrk")
    ok = got is not None and len(got) == len(ref) and all(
        abs(float(g["onset"]) - o) <= 1e-12 and abs(float(g["duration"]) - d) <= 1e-12 and g["trial_type"] == t
        for g, o, d, t in zip(got, ref.onset, ref.duration, ref.description))
    check("BrainVision markers as events (mne.read_annotations)", ok,
          f"{got if got is None else len(got)} vs {list(zip(ref.onset, ref.duration, ref.description))}"[:300]
          if not ok else f"{len(ref)} markers with equal onset, duration and type/description")
    p = os.path.join(tmp, "tr.nwb")
    fw.write_nwb(p, rng.standard_normal((5000, 1)), fs=1000.0, labels=["a"])
    import h5py as _h5
    starts = np.array([0.5, 1.25, 2.0])
    with _h5.File(p, "a") as f_:
        g = f_.require_group("intervals/trials")
        g.attrs["neurodata_type"] = "TimeIntervals"
        g.attrs["colnames"] = ["start_time", "stop_time", "rt", "condition"]
        g.create_dataset("id", data=np.arange(3))
        g.create_dataset("start_time", data=starts)
        g.create_dataset("stop_time", data=starts + 0.75)
        g.create_dataset("rt", data=[0.41, 0.52, 0.63])
        g.create_dataset("condition", data=[b"easy", b"hard", b"easy"], dtype=_h5.string_dtype())
    got, err = events(p)
    ok = got is not None and len(got) == 3 and all(
        float(g["onset"]) == s_ and abs(float(g["duration"]) - 0.75) <= 1e-12 and g["condition"] == c and
        float(g["rt"]) == r_ for g, s_, c, r_ in zip(got, starts, ["easy", "hard", "easy"], [0.41, 0.52, 0.63]))
    check("NWB intervals/trials as the trial table (values written by h5py)", ok, str(got or err)[:200])
print(f"{passed} checks passed, {failed} failed")
sys.exit(1 if failed else 0)
