#!/usr/bin/python3
"""Bad recordings through `bandlink power`: exit 2, one error line naming the file and the header field (or the
channel and the available names), and no output folder written. Files come from format_writers.py, written
from the published specifications (EDF: Kemp et al. 1992; EDF+: Kemp & Olivan 2003; BDF: BioSemi 24-bit;
BrainVision exchange format 1.0; NWB 2.x via h5py) and then damaged the way real files go wrong.
Exit 77 (skipped) without numpy/h5py. usage: formats_errors.py BANDLINK"""
import json
import os
import subprocess
import sys
import tempfile

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
try:
    import numpy as np
    import h5py  # noqa: F401
except ImportError:
    print("numpy/h5py not installed: skipped")
    sys.exit(77)
import format_writers as fw

bandlink = sys.argv[1]
rng = np.random.default_rng(2)
failed = passed = 0


def edf(path, **kw):
    labels = kw.pop("labels", ["Fz", "Cz", "Pz"])
    dig = rng.integers(-1000, 1000, size=(256 * 10, len(labels)))
    fw.write_edf(path, labels, ["uV"] * len(labels), [-3276.8] * len(labels), [3276.7] * len(labels),
                 [-32768] * len(labels), [32767] * len(labels), dig, 256, 1, **kw)


def case(tmp, name, ext, write, expect, channels=("Cz",)):
    """expect: substrings that must all be in the error line"""
    global failed, passed
    d = os.path.join(tmp, name)
    os.makedirs(d)
    write(os.path.join(d, "p1." + ext))
    open(os.path.join(d, "trials.csv"), "w").write(
        "participant,onset,rt,correct\n" + "".join(f"p1,{2 + k},0.5,1\n" for k in range(5)))
    json.dump({"trials": {"file": "trials.csv", "participant": "participant", "rt": "rt", "response": "correct",
                          "upper": ["1"]},
               "recordings": {"file": "{participant}." + ext, "onset": "onset", "channels": list(channels)},
               "power": {"window": {"from": -1, "to": 0}, "bands": {"theta": [4, 8]}}, "output": "out"},
              open(os.path.join(d, "study.json"), "w"))
    r = subprocess.run([bandlink, "power", os.path.join(d, "study.json"), "--quiet"], capture_output=True, text=True)
    lines = [x for x in r.stderr.splitlines() if x.startswith("bandlink: error:")]
    msg = lines[0] if lines else r.stderr.strip()
    ok = r.returncode == 2 and len(lines) == 1 and all(e in msg for e in expect) and \
        not os.path.exists(os.path.join(d, "out"))
    passed += ok
    failed += not ok
    print(f"{'PASS' if ok else 'FAIL'}: {name}: exit {r.returncode}, nothing written: {msg[:170]}")


with tempfile.TemporaryDirectory() as tmp:
    # Kemp 1992: header bytes = 256 * (ns + 1)
    case(tmp, "edf_lying_header_size", "edf", lambda p: edf(p, header_bytes_field=1000),
         ["p1.edf", "number of bytes in header record", "1000"])
    # data records promised by the header but cut off
    def truncated(p):
        edf(p)
        data = open(p, "rb").read()
        open(p, "wb").write(data[:len(data) - 700])
    case(tmp, "edf_truncated_records", "edf", truncated, ["p1.edf", "truncated", "number of data records", "10"])
    case(tmp, "edf_more_records_than_file", "edf", lambda p: edf(p, nrec_field=12),
         ["p1.edf", "number of data records", "12"])
    # one rate per recording: samples per data record differ between signals
    def mixed_rates(p):
        dig = rng.integers(-1000, 1000, size=(256 * 10, 2))
        fw.write_edf(p, ["Fz", "Cz"], ["uV"] * 2, [-100] * 2, [100] * 2, [-32768] * 2, [32767] * 2, dig, 256, 1,
                     extra_spr=[256, 128])
    case(tmp, "edf_mismatched_rates", "edf", mixed_rates, ["p1.edf", "samples per data record", "Cz", "128"])
    case(tmp, "edf_missing_name", "edf", lambda p: edf(p, labels=["Fz", "", "Pz"]),
         ["p1.edf", "label of signal 2", "empty"])
    case(tmp, "edf_duplicate_name", "edf", lambda p: edf(p, labels=["Fz", "Cz", "Cz"]),
         ["p1.edf", "label of signal 3", "Cz"])
    case(tmp, "bdf_unknown_channel", "bdf", lambda p: edf(p, bdf=True), ["p1.bdf", "\"Oz\"", "Fz, Cz, Pz",
                                                                         "recordings.channels[0]"], channels=["Oz"])
    case(tmp, "edf_unknown_pair", "edf", edf, ["p1.edf", "Cz-Oz", "Fz, Cz, Pz"], channels=["Cz-Oz"])
    # BrainVision: NumberOfChannels disagrees with [Channel Infos]; data not a whole number of samples
    def bv(p, **kw):
        fw.write_brainvision(p[:-5], ["Fz", "Cz"], [0.1, 0.1], ["\u00b5V"] * 2,
                             rng.integers(-100, 100, size=(5000, 2)), 500, **kw)
    case(tmp, "brainvision_channel_count", "vhdr", lambda p: bv(p, n_channels_field=3),
         ["p1.vhdr", "NumberOfChannels", "3", "Ch2"])
    case(tmp, "brainvision_truncated", "vhdr", lambda p: bv(p, data_bytes=19999),
         ["p1.vhdr", "DataFile", "19999 bytes", "truncated"])
    # NWB: the electrodes table names two channels alike; timestamps not evenly spaced
    case(tmp, "nwb_duplicate_label", "nwb",
         lambda p: fw.write_nwb(p, rng.standard_normal((8000, 2)), fs=1000.0, labels=["LFP1", "LFP1"]),
         ["p1.nwb", "LFP1", "label"])
    ts = np.arange(8000) / 1000.0
    ts[4000:] += 0.5
    case(tmp, "nwb_uneven_timestamps", "nwb",
         lambda p: fw.write_nwb(p, rng.standard_normal((8000, 2)), timestamps=ts, labels=["a", "b"]),
         ["p1.nwb", "timestamps", "even"], channels=["a"])
    def two_series(p):
        fw.write_nwb(p, rng.standard_normal((8000, 2)), fs=1000.0, labels=["a", "b"], where="acquisition/raw")
        fw.write_nwb(p, rng.standard_normal((8000, 2)), fs=1000.0, labels=["a", "b"], where="acquisition/lfp",
                     append=True)
    case(tmp, "nwb_two_series", "nwb", two_series, ["p1.nwb", "/acquisition/lfp", "/acquisition/raw",
                                                    "recordings.series"], channels=["a"])
print(f"{passed} checks passed, {failed} failed")
sys.exit(1 if failed else 0)
