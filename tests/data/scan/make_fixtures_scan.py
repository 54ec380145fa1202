"""Reference values for the scan tests (glitchbook tests/scan_reference.rs).

Run: python3 make_fixtures_scan.py   (SciPy 1.17.1, NumPy 2.4.6)
"""
import json
import numpy as np
import scipy
import scipy.signal

rng = np.random.default_rng(20261202)
cases = []
# Case A: odd number of segments (median of an odd count); coloured by a
# first-order filter plus a sinusoid, amplitude of order one.
x = scipy.signal.lfilter([1.0], [1.0, -0.9], rng.standard_normal(4096))
x += 0.5 * np.sin(2 * np.pi * 60.0 * np.arange(4096) / 512.0)
f, p = scipy.signal.welch(x, fs=512.0, window="hann", nperseg=256, noverlap=128,
                          average="median")
cases.append(dict(name="odd_segments", fs=512.0, nperseg=256, noverlap=128,
                  x=x.tolist(), f=f.tolist(), pxx=p.tolist()))
# Case B: even number of segments (numpy median averages the middle two),
# strain-like amplitude 1e-21 to check that nothing underflows.
y = 1e-21 * rng.standard_normal(2048 + 64)
f, p = scipy.signal.welch(y, fs=1024.0, window="hann", nperseg=128, noverlap=64,
                          average="median")
n_seg = (len(y) - 128) // 64 + 1
assert n_seg % 2 == 0, n_seg
cases.append(dict(name="even_segments_strain_scale", fs=1024.0, nperseg=128, noverlap=64,
                  x=y.tolist(), f=f.tolist(), pxx=p.tolist()))
meta = dict(source="scipy.signal.welch(x, fs, window='hann', nperseg, noverlap, average='median')",
            scipy=scipy.__version__, numpy=np.__version__)
with open("welch_median.json", "w") as fh:
    json.dump(dict(meta=meta, cases=cases), fh)
print(meta)
