"""HDF5 strain fixtures for glitchbook's reader, written by h5py.

    pip install h5py==3.16.0 numpy==2.4.6
    python3 tests/data/hdf5/make_fixtures.py

Files (README.md has the calls):
  contiguous_f64.h5   strain/Strain float64, contiguous, Xstart/Xspacing
  chunked_gzip_f32.h5 strain/Strain float32, chunks of 4096, gzip level 4,
                      with a NaN gap
  chunked_shuffle_f64.h5  float64, chunks of 1000 (not a divisor of the
                      length), shuffle + gzip, integer Xstart attribute
  custom_layout.h5    data/h with attributes t0 (float) and dt (float), the
                      layout glitchbook reads when told the names
  bad_*.h5            a missing attribute, a 2-D dataset, a string spacing,
                      a zero spacing, an empty dataset
  expected/*.npy      the samples written (float64)
"""
import os

import h5py
import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
T0 = 1400000000.0
RATE = 256.0


def noise(n, seed):
    rng = np.random.default_rng(seed)
    x = rng.normal(0.0, 1e-21, n)
    t = np.arange(n) / RATE
    # A loud sine-Gaussian at 40.3 s, 60 Hz, so scans find a trigger.
    x += 2e-20 * np.exp(-((t - 40.3) / 0.05) ** 2) * np.cos(2 * np.pi * 60 * (t - 40.3))
    return x


def strain(path, x, chunks=None, compression=None, shuffle=False, start=T0, **kw):
    with h5py.File(os.path.join(HERE, path), "w") as f:
        d = f.create_group("strain").create_dataset(
            "Strain", data=x, chunks=chunks, compression=compression, shuffle=shuffle, **kw)
        d.attrs["Xstart"] = start
        d.attrs["Xspacing"] = 1.0 / RATE
        d.attrs["Xunits"] = "second"


def main():
    os.makedirs(os.path.join(HERE, "expected"), exist_ok=True)
    n = int(64 * RATE)
    a = noise(n, 1)
    strain("contiguous_f64.h5", a)
    np.save(os.path.join(HERE, "expected", "contiguous_f64.npy"), a)

    b = noise(n, 2).astype(np.float32) * np.float32(1e21)
    b[int(10 * RATE):int(11.5 * RATE)] = np.nan
    strain("chunked_gzip_f32.h5", b, chunks=(4096,), compression="gzip", compression_opts=4)
    np.save(os.path.join(HERE, "expected", "chunked_gzip_f32.npy"), b.astype(np.float64))

    c = noise(n + 123, 3)
    strain("chunked_shuffle_f64.h5", c, chunks=(1000,), compression="gzip", shuffle=True,
           start=int(T0))
    np.save(os.path.join(HERE, "expected", "chunked_shuffle_f64.npy"), c)

    with h5py.File(os.path.join(HERE, "custom_layout.h5"), "w") as f:
        d = f.create_group("data").create_dataset("h", data=a[:4096])
        d.attrs["t0"] = T0 + 0.5
        d.attrs["dt"] = 1.0 / 512

    with h5py.File(os.path.join(HERE, "bad_missing_attr.h5"), "w") as f:
        d = f.create_group("strain").create_dataset("Strain", data=a[:100])
        d.attrs["Xstart"] = T0
    with h5py.File(os.path.join(HERE, "bad_2d.h5"), "w") as f:
        d = f.create_group("strain").create_dataset("Strain", data=a[:100].reshape(10, 10))
        d.attrs["Xstart"] = T0
        d.attrs["Xspacing"] = 1.0 / RATE
    with h5py.File(os.path.join(HERE, "bad_string_spacing.h5"), "w") as f:
        d = f.create_group("strain").create_dataset("Strain", data=a[:100])
        d.attrs["Xstart"] = T0
        d.attrs["Xspacing"] = "1/256"
    with h5py.File(os.path.join(HERE, "bad_zero_spacing.h5"), "w") as f:
        d = f.create_group("strain").create_dataset("Strain", data=a[:100])
        d.attrs["Xstart"] = T0
        d.attrs["Xspacing"] = 0.0
    with h5py.File(os.path.join(HERE, "bad_empty.h5"), "w") as f:
        d = f.create_group("strain").create_dataset("Strain", data=np.zeros(0))
        d.attrs["Xstart"] = T0
        d.attrs["Xspacing"] = 1.0 / RATE
    print("h5py", h5py.__version__, "HDF5", h5py.version.hdf5_version, "NumPy", np.__version__)


if __name__ == "__main__":
    main()
