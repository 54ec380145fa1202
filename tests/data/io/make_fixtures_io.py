"""Write the small .npy fixtures read by tests/io_inputs.rs.

Run from this directory with NumPy 2.4.6:  python3 make_fixtures_io.py
Each file holds the same 7 samples (with a NaN run) so the Rust reader can be
checked against NumPy's own writer for format versions 1.0, 2.0 and 3.0.
The expected values are stored in npy_expected.json as NumPy reads them back.
"""
import json

import numpy as np

samples = [1.5, -2.25, float("nan"), float("nan"), 3.0e-3, 1.0e10, 0.1]

files = {}
for dtype, tag in [(np.float64, "f8"), (np.float32, "f4")]:
    a = np.array(samples, dtype=dtype)
    # np.save writes the oldest version that can hold the header: 1.0 here.
    name = f"v1_{tag}.npy"
    np.save(name, a)
    files[name] = a
    for version in [(2, 0), (3, 0)]:
        name = f"v{version[0]}_{tag}.npy"
        with open(name, "wb") as f:
            np.lib.format.write_array(f, a, version=version)
        files[name] = a

expected = {}
for name, a in files.items():
    back = np.load(name)
    with open(name, "rb") as f:
        version = np.lib.format.read_magic(f)
    expected[name] = {
        "version": list(version),
        "descr": back.dtype.str,
        # Values as float64 (NaN written as null).
        "values": [None if np.isnan(x) else float(x) for x in back.astype(np.float64)],
    }
with open("npy_expected.json", "w") as f:
    json.dump({"numpy_version": np.__version__, "files": expected}, f, indent=1)
