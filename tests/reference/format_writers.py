"""Test-side writers for recording formats, written from the published specifications (not from bandlink's
readers), shared by formats_mne.py and the CLI tests.
- EDF: Kemp B, Värri A, Rosa AC, Nielsen KD, Gade J (1992), "A simple format for exchange of digitized
  polygraphic recordings", Electroenceph Clin Neurophysiol 82:391-393: 256-byte ASCII header, 256 bytes per
  signal (label 16, transducer 80, dimension 8, pmin 8, pmax 8, dmin 8, dmax 8, prefilter 80, samples per
  record 8, reserved 32), data records of int16 little-endian.
- EDF+: Kemp B, Olivan J (2003), "European data format 'plus' (EDF+)", Clin Neurophysiol 114:1755-1761:
  "EDF+C" in the reserved field, an "EDF Annotations" signal whose first TAL per record is "+<t>\x14\x14\x00".
- BDF: BioSemi's 24-bit variant: version byte 0xFF + "BIOSEMI", reserved "24BIT", int24 little-endian.
- BrainVision: Brain Products "Brain Vision Data Exchange Format" 1.0 (.vhdr/.vmrk/.eeg).
- NWB 2.x: nwb-schema core (ElectricalSeries: data + conversion/offset/resolution/unit, starting_time + rate
  or timestamps, electrodes DynamicTableRegion into /general/extracellular_ephys/electrodes), via h5py.
"""
import numpy as np


def _f(text, width):
    s = str(text).encode("latin-1")
    assert len(s) <= width, (text, width)
    return s + b" " * (width - len(s))


def write_edf(path, labels, units, pmin, pmax, dmin, dmax, digital, spr, duration, bdf=False, plus=False,
              nrec_field=None, header_bytes_field=None, extra_spr=None, annotations=()):
    """digital: int array (n_records*spr, channels). plus=True adds an EDF Annotations signal.
    nrec_field / header_bytes_field override the header fields (to write lying headers);
    extra_spr: per-channel samples per record overriding spr (to write mismatched rates)."""
    ch = len(labels)
    n = digital.shape[0]
    nrec = n // spr
    ann_spr = (60 if annotations else 30) if plus else 0  # annotation signal: "samples" of TAL text bytes
    ns = ch + (1 if plus else 0)
    h = b"\xffBIOSEMI" if bdf else _f("0", 8)
    h += _f("X X X X" if plus else "test", 80) + _f("Startdate 02-DEC-2026 X X X" if plus else "test", 80)
    h += _f("02.12.26", 8) + _f("10.00.00", 8)
    h += _f(header_bytes_field if header_bytes_field is not None else 256 * (ns + 1), 8)
    h += _f(("BDF+C" if bdf else "EDF+C") if plus else ("24BIT" if bdf else ""), 44)
    h += _f(nrec_field if nrec_field is not None else nrec, 8) + _f(repr(duration) if duration != int(duration)
                                                                    else int(duration), 8) + _f(ns, 4)
    all_labels = list(labels) + (["BDF Annotations" if bdf else "EDF Annotations"] if plus else [])
    sprs = list(extra_spr or [spr] * ch) + ([ann_spr] if plus else [])
    cols = [
        [_f(x, 16) for x in all_labels],
        [_f("AgAgCl electrode", 80)] * ch + ([_f("", 80)] if plus else []),
        [_f(u, 8) for u in units] + ([_f("", 8)] if plus else []),
        [_f(x, 8) for x in pmin] + ([_f(-1, 8)] if plus else []),
        [_f(x, 8) for x in pmax] + ([_f(1, 8)] if plus else []),
        [_f(x, 8) for x in dmin] + ([_f(-8388608 if bdf else -32768, 8)] if plus else []),
        [_f(x, 8) for x in dmax] + ([_f(8388607 if bdf else 32767, 8)] if plus else []),
        [_f("HP:0.1Hz LP:100Hz", 80)] * ch + ([_f("", 80)] if plus else []),
        [_f(s, 8) for s in sprs],
        [_f("", 32)] * ns,
    ]
    for col in cols:
        h += b"".join(col)
    bps = 3 if bdf else 2
    out = bytearray(h)
    for r in range(nrec):
        for c in range(ch):
            s = sprs[c]
            block = digital[r * s:(r + 1) * s, c].astype("<i4")
            if bdf:
                b = block.astype("<i4").view(np.uint8).reshape(-1, 4)[:, :3]
                out += b.tobytes()
            else:
                out += block.astype("<i2").tobytes()
        if plus:
            tal = ("+%g\x14\x14\x00" % (r * duration)).encode()
            for onset, dur, text in annotations:  # each in the record whose time span holds its onset
                if r * duration <= onset < (r + 1) * duration:
                    tal += (("+%g" % onset) + ("\x15%g" % dur if dur else "") + "\x14" + text + "\x14\x00").encode()
            assert len(tal) <= ann_spr * bps, "annotations do not fit the record"
            out += tal + b"\x00" * (ann_spr * bps - len(tal))
    open(path, "wb").write(bytes(out))


def write_brainvision(stem, labels, resolution, units, raw, fs, binary="INT_16", vectorized=False,
                      n_channels_field=None, data_bytes=None, markers=None):
    """raw: stored values (frames, channels). Writes stem.vhdr, stem.vmrk, stem.eeg."""
    import os
    base = os.path.basename(stem)
    dtype = {"INT_16": "<i2", "INT_32": "<i4", "IEEE_FLOAT_32": "<f4"}[binary]
    arr = raw.astype(dtype)
    data = (arr.T if vectorized else arr).tobytes()
    if data_bytes is not None:
        data = data[:data_bytes]
    open(stem + ".eeg", "wb").write(data)
    ch_lines = "".join(f"Ch{i + 1}={labels[i].replace(',', chr(92) + '1')},,{resolution[i]!r},{units[i]}\n"
                       for i in range(len(labels)))
    vhdr = ("Brain Vision Data Exchange Header File Version 1.0\n; written by a test\n\n[Common Infos]\n"
            "Codepage=UTF-8\n"
            f"DataFile={base}.eeg\nMarkerFile={base}.vmrk\nDataFormat=BINARY\n"
            f"DataOrientation={'VECTORIZED' if vectorized else 'MULTIPLEXED'}\n"
            f"NumberOfChannels={n_channels_field if n_channels_field is not None else len(labels)}\n"
            f"SamplingInterval={1e6 / fs!r}\n\n[Binary Infos]\nBinaryFormat={binary}\n\n"
            f"[Channel Infos]\n{ch_lines}")
    open(stem + ".vhdr", "w", encoding="utf-8").write(vhdr)
    vmrk = ("Brain Vision Data Exchange Marker File, Version 1.0\n\n[Common Infos]\nCodepage=UTF-8\n"
            f"DataFile={base}.eeg\n\n[Marker Infos]\nMk1=New Segment,,1,1,0\n")
    for k, (kind, desc, pos, pts) in enumerate(markers or [("Stimulus", "S  1", 100, 1)]):
        vmrk += f"Mk{k + 2}={kind},{desc},{pos},{pts},0\n"
    open(stem + ".vmrk", "w", encoding="utf-8").write(vmrk)


def write_nwb(path, data, fs=None, timestamps=None, labels=None, conversion=1.0, offset=0.0,
              where="acquisition/ElectricalSeries", electrode_column="label", append=False):
    """An NWB 2.x-shaped file with one ElectricalSeries; data (frames, channels) stored as given.
    append=True adds the series to an existing file (its electrodes table is reused)."""
    import h5py
    with h5py.File(path, "a" if append else "w") as f:
        if append:
            _series(f, data, fs, timestamps, labels, conversion, offset, where)
            return
        f.attrs["namespace"] = "core"
        f.attrs["neurodata_type"] = "NWBFile"
        f.attrs["nwb_version"] = "2.6.0"
        for g in ("acquisition", "analysis", "processing", "stimulus", "general"):
            f.require_group(g)
        f.create_dataset("session_start_time", data="2026-12-02T10:00:00+00:00")
        f.create_dataset("identifier", data="test")
        ch = data.shape[1]
        if labels is not None:
            t = f.create_group("general/extracellular_ephys/electrodes")
            t.attrs["neurodata_type"] = "DynamicTable"
            t.attrs["colnames"] = [electrode_column, "location"]
            t.create_dataset("id", data=np.arange(ch))
            t.create_dataset(electrode_column, data=[s.encode() for s in labels], dtype=h5py.string_dtype())
            t.create_dataset("location", data=[b"CA1"] * ch, dtype=h5py.string_dtype())
        _series(f, data, fs, timestamps, labels, conversion, offset, where)


def _series(f, data, fs, timestamps, labels, conversion, offset, where):
    """One ElectricalSeries (and its parent groups) at `where` in the open h5py file f."""
    ch = data.shape[1]
    parts = where.split("/")
    for k in range(2, len(parts)):
        g = f.require_group("/".join(parts[:k]))
        if k == 2 and parts[0] == "processing":
            g.attrs["neurodata_type"] = "ProcessingModule"
        elif k == 3:
            g.attrs["neurodata_type"] = "LFP"
    s = f.create_group(where)
    s.attrs["neurodata_type"] = "ElectricalSeries"
    s.attrs["namespace"] = "core"
    d = s.create_dataset("data", data=data)
    d.attrs["conversion"] = float(conversion)
    d.attrs["offset"] = float(offset)
    d.attrs["resolution"] = -1.0
    d.attrs["unit"] = "volts"
    if timestamps is None:
        st = s.create_dataset("starting_time", data=0.0)
        st.attrs["rate"] = float(fs)
        st.attrs["unit"] = "seconds"
    else:
        ts = s.create_dataset("timestamps", data=np.asarray(timestamps, dtype="f8"))
        ts.attrs["unit"] = "seconds"
    if labels is not None:
        e = s.create_dataset("electrodes", data=np.arange(ch))
        e.attrs["neurodata_type"] = "DynamicTableRegion"
        e.attrs["table"] = f["general/extracellular_ephys/electrodes"].ref
