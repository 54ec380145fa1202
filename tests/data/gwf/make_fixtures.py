"""Frame-file fixtures for glitchbook's reader, written by gwframe (PyPI,
built on the reference C++ frame library).

    pip install gwframe==0.8.4 numpy==2.4.6
    python3 tests/data/gwf/make_fixtures.py

Writes into this directory (see README.md):
  codecs_<mode>.gwf   one file per gwframe compression mode, 3 frames of 1 s,
                      every element type as processed data, ADC and simulated
                      channels; expected samples in expected/<channel>.npy
  adc_calib.gwf       ADC channels whose slope and bias were set afterwards
                      (gwframe has no call for them; see patch_adc_calibration)
  gap/T-GAP-*.gwf     consecutive 4-s files of one channel, one file missing,
                      and one file whose frames leave a 1-s hole
  complex.gwf         a complex64 channel (the reader must refuse it)
  manifest.json       what each file holds: channels, kinds, element types,
                      rates, frame starts, compression codes per vector
Every file is read back with gwframe.read and compared with what was written
before anything is saved.
"""
import json
import os
import struct
import sys

import gwframe
import numpy as np
from gwframe.types import Compression

HERE = os.path.dirname(os.path.abspath(__file__))
T0 = 1400000000
RATE = 256
FRAMES = 3
SMOOTH_SEED = 13  # the seed (channel index) of TB9:ADC_FLOAT64

MODES = {
    "raw": Compression.RAW,
    "gzip": Compression.GZIP,
    "diffgzip": Compression.DIFF_GZIP,
    "zs2": Compression.ZERO_SUPPRESS_WORD_2,
    "zs4": Compression.ZERO_SUPPRESS_WORD_4,
    "zs8": Compression.ZERO_SUPPRESS_WORD_8,
    "zsgz": Compression.ZERO_SUPPRESS_OTHERWISE_GZIP,
}

DTYPES = ["int8", "int16", "int32", "int64", "uint8", "uint16", "uint32",
          "uint64", "float32", "float64"]


def series(dtype, n, seed):
    """Compressible but not trivial samples: a random walk for integers
    (with a few wide jumps and the type's extremes), a quantised sine plus
    walk for floats (with signed zeros, NaN and infinities in float64)."""
    rng = np.random.default_rng(seed)
    dt = np.dtype(dtype)
    if dt.kind in "iu":
        info = np.iinfo(dt)
        span = int(info.max) - int(info.min)
        steps = rng.integers(-3, 4, n)
        walk = np.cumsum(steps) + (0 if dt.kind == "i" else span // 2)
        x = np.clip(walk, int(info.min) + 8, int(info.max) - 8).astype(object)
        # Wide jumps (exercise wide zero-suppression blocks) and extremes.
        x[n // 3] = int(info.max)
        x[n // 3 + 1] = int(info.min)
        x[n // 2] = int(info.min) + span // 3
        return np.array([int(v) for v in x], dtype=dt)
    t = np.arange(n)
    if seed == SMOOTH_SEED:
        # Slow and smooth: small bit-pattern differences, so the reference
        # library picks zero suppression for 8-byte floats.
        return (np.sin(2 * np.pi * 0.25 * t / RATE) * 100 + 300).astype(dt)
    x = np.round(np.sin(2 * np.pi * 3.0 * t / RATE) * 512) / 64 + np.cumsum(rng.integers(-1, 2, n)) / 8
    x = x.astype(dt)
    x[5] = -0.0
    x[6] = 1e-30 if dt == np.float32 else 1e-300
    if dt == np.float64:
        x[7] = np.nan
        x[8] = np.inf
        x[9] = -np.inf
    return x


def channels():
    """(name, kind, dtype, rate) of the codec files' channels."""
    out = [(f"TB9:PROC_{d.upper()}", "proc", d, RATE) for d in DTYPES]
    out += [("TB9:ADC_INT16", "adc", "int16", RATE),
            ("TB9:ADC_INT32", "adc", "int32", 2 * RATE),
            ("TB9:ADC_FLOAT32", "adc", "float32", RATE),
            ("TB9:ADC_FLOAT64", "adc", "float64", RATE),
            ("TB9:SIM_FLOAT64", "sim", "float64", RATE // 2),
            ("TB9:SIM_INT16", "sim", "int16", RATE)]
    return out


# -- a minimal reader of what gwframe wrote (to record compression codes and
#    structure positions in the manifest; the Rust reader is what is tested) --

def structures(b):
    """(position, length, class name, instance) of every structure."""
    pos, names, out = 40, {1: "FrSH", 2: "FrSE"}, []
    while pos < len(b):
        length, _chk, cls, inst = struct.unpack_from("<QBBI", b, pos)
        if cls == 1:
            n = struct.unpack_from("<H", b, pos + 14)[0]
            name = b[pos + 16:pos + 16 + n - 1].decode()
            names[struct.unpack_from("<H", b, pos + 16 + n)[0]] = name
        out.append((pos, length, names.get(cls, "?"), inst))
        pos += length
    return out


def vect_codes(b):
    """Compression code and channel name of every FrVect, in file order."""
    out = []
    for pos, _length, cls, _inst in structures(b):
        if cls == "FrVect":
            n = struct.unpack_from("<H", b, pos + 14)[0]
            name = b[pos + 16:pos + 16 + n - 1].decode()
            out.append((name, struct.unpack_from("<H", b, pos + 16 + n)[0]))
    return out


# POSIX cksum CRC (the frame format's checksum), for the calibration patch.
_T = []
for _i in range(256):
    _c = _i << 24
    for _ in range(8):
        _c = ((_c << 1) ^ 0x04C11DB7) if _c & 0x80000000 else (_c << 1)
        _c &= 0xFFFFFFFF
    _T.append(_c)


def cksum(data):
    c = 0
    for x in data:
        c = ((c << 8) & 0xFFFFFFFF) ^ _T[(c >> 24) ^ x]
    n = len(data)
    while n:
        c = ((c << 8) & 0xFFFFFFFF) ^ _T[(c >> 24) ^ (n & 0xFF)]
        n >>= 8
    return (~c) & 0xFFFFFFFF


def read_back(path, name, nframes):
    """A channel as gwframe reads it, frame by frame, concatenated; the file
    checksum is validated on the first read."""
    parts = [gwframe.read(path, name, frame_index=k, validate_checksum=(k == 0)).array
             for k in range(nframes)]
    return np.concatenate(parts)


def write_codec_files(manifest):
    chans = channels()
    data = {name: series(d, rate * FRAMES, seed)
            for seed, (name, _k, d, rate) in enumerate(chans)}
    os.makedirs(os.path.join(HERE, "expected"), exist_ok=True)
    for name, _k, _d, _r in chans:
        np.save(os.path.join(HERE, "expected", name.replace(":", "_") + ".npy"),
                data[name].astype(np.float64))
    for mode, comp in MODES.items():
        path = os.path.join(HERE, f"codecs_{mode}.gwf")
        with gwframe.FrameWriter(path, compression=comp) as w:
            for k in range(FRAMES):
                f = gwframe.Frame(start=float(T0 + k), duration=1.0, name="TB9", run=-1)
                for name, kind, _d, rate in chans:
                    f.add_channel(name, data[name][k * rate:(k + 1) * rate],
                                  sample_rate=rate, unit="ct" if kind == "adc" else "m",
                                  channel_type=kind)
                w.write_frame(f)
        for name, _k, _d, _r in chans:
            back = read_back(path, name, FRAMES)
            assert back.dtype == data[name].dtype, (path, name)
            assert np.array_equal(back, data[name], equal_nan=True), (path, name)
        b = open(path, "rb").read()
        codes = {}
        for name, code in vect_codes(b):
            codes.setdefault(name, []).append(code)
        manifest[os.path.basename(path)] = {
            "mode": mode,
            "frames": [T0 + k for k in range(FRAMES)],
            "channels": [{"name": n, "kind": k, "dtype": d, "rate": r,
                          "expected": "expected/" + n.replace(":", "_") + ".npy",
                          "compress": codes[n]} for n, k, d, r in chans],
        }


def patch_adc_calibration(path, calib):
    """Set bias and slope (REAL_4) of FrAdcData structures in place and
    recompute their checksums and the file checksum (FrEndOfFile chkSumFile).
    gwframe 0.8.4 has no call to set them; the reference library checks every
    structure checksum when it reads, so gwframe reading the patched file
    back (below) confirms the patch is well formed."""
    b = bytearray(open(path, "rb").read())
    for pos, length, cls, _inst in structures(bytes(b)):
        if cls != "FrAdcData":
            continue
        q = pos + 14
        n = struct.unpack_from("<H", b, q)[0]
        name = b[q + 2:q + 2 + n - 1].decode()
        q += 2 + n
        q += 2 + struct.unpack_from("<H", b, q)[0]  # comment
        q += 12  # channelGroup, channelNumber, nBits
        if name in calib:
            bias, slope = calib[name]
            struct.pack_into("<ff", b, q, bias, slope)
            struct.pack_into("<I", b, pos + length - 4, cksum(b[pos:pos + length - 4]))
    struct.pack_into("<I", b, len(b) - 4, cksum(b[:-4]))
    open(path, "wb").write(bytes(b))


def write_adc_calib(manifest):
    path = os.path.join(HERE, "adc_calib.gwf")
    counts = {"TB9:CAL_INT16": series("int16", RATE * 2, 101),
              "TB9:CAL_INT32": series("int32", RATE * 2, 102)}
    calib = {"TB9:CAL_INT16": (np.float32(-0.75), np.float32(6.103515625e-05)),
             "TB9:CAL_INT32": (np.float32(12.5), np.float32(-3.0e-3))}
    with gwframe.FrameWriter(path, compression=Compression.ZERO_SUPPRESS_OTHERWISE_GZIP) as w:
        for k in range(2):
            f = gwframe.Frame(start=float(T0 + k), duration=1.0, name="TB9")
            for name, x in counts.items():
                f.add_channel(name, x[k * RATE:(k + 1) * RATE], sample_rate=RATE,
                              unit="ct", channel_type="adc")
            w.write_frame(f)
    patch_adc_calibration(path, calib)
    entry = {"frames": [T0, T0 + 1], "channels": []}
    for name, x in counts.items():
        back = read_back(path, name, 2)  # raw counts: gwframe applies no calibration
        assert np.array_equal(back, x), name
        bias, slope = calib[name]
        # value = bias + slope x counts (frame specification, FrAdcData).
        physical = np.float64(bias) + np.float64(slope) * x.astype(np.float64)
        stem = name.replace(":", "_")
        np.save(os.path.join(HERE, "expected", stem + "_counts.npy"), x.astype(np.float64))
        np.save(os.path.join(HERE, "expected", stem + "_calibrated.npy"), physical)
        entry["channels"].append({"name": name, "dtype": str(x.dtype), "rate": RATE,
                                  "bias": float(bias), "slope": float(slope),
                                  "counts": f"expected/{stem}_counts.npy",
                                  "calibrated": f"expected/{stem}_calibrated.npy"})
    manifest["adc_calib.gwf"] = entry


def write_gap_files(manifest):
    """Files T-GAP-<start>-4.gwf of 2-s frames for one channel; the file at
    T0 + 8 is not written. T-GAP-<T0+16>-4 holds frames at 16, 17 and 19 s
    (1-s frames), leaving a 1-s hole inside the file."""
    d = os.path.join(HERE, "gap")
    os.makedirs(d, exist_ok=True)
    name, rate = "TB9:GAP_STRAIN", 128
    full = series("float32", rate * 20, 7)
    np.save(os.path.join(HERE, "expected", "TB9_GAP_STRAIN_full.npy"), full.astype(np.float64))
    files = []
    for start, frames in [(T0, [(0, 2), (2, 2)]), (T0 + 4, [(0, 2), (2, 2)]),
                          (T0 + 12, [(0, 2), (2, 2)]), (T0 + 16, [(0, 1), (1, 1), (3, 1)])]:
        path = os.path.join(d, f"T-GAP-{start}-4.gwf")
        with gwframe.FrameWriter(path, compression=Compression.GZIP) as w:
            for off, dur in frames:
                t = start + off
                i = (t - T0) * rate
                w.write(full[i:i + dur * rate], start=float(t), sample_rate=rate, name=name)
        back = read_back(path, name, len(frames))
        want = np.concatenate([full[(start + o - T0) * rate:(start + o + dur - T0) * rate]
                               for o, dur in frames])
        assert np.array_equal(back, want), path
        files.append({"file": "gap/" + os.path.basename(path),
                      "frames": [[start + o, dur] for o, dur in frames]})
    manifest["gap"] = {"channel": name, "rate": rate, "t0": T0,
                       "full": "expected/TB9_GAP_STRAIN_full.npy", "files": files}


def write_complex(manifest):
    path = os.path.join(HERE, "complex.gwf")
    f = gwframe.Frame(start=float(T0), duration=1.0, name="TB9")
    z = (np.arange(64) + 1j * np.arange(64)).astype(np.complex64)
    f.add_channel("TB9:PROC_COMPLEX", z, sample_rate=64)
    f.add_channel("TB9:PROC_REAL", np.arange(64, dtype=np.float32), sample_rate=64)
    f.write(path, compression=Compression.RAW)
    manifest["complex.gwf"] = {"complex": "TB9:PROC_COMPLEX", "real": "TB9:PROC_REAL"}


def main():
    np.random.seed(0)
    manifest = {"gwframe": gwframe.__version__, "numpy": np.__version__}
    write_codec_files(manifest)
    write_adc_calib(manifest)
    write_gap_files(manifest)
    write_complex(manifest)
    with open(os.path.join(HERE, "manifest.json"), "w") as fh:
        json.dump(manifest, fh, indent=1, sort_keys=True)
        fh.write("\n")
    print("written with gwframe", gwframe.__version__, file=sys.stderr)


if __name__ == "__main__":
    main()
