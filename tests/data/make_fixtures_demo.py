"""Reference values for tests/demo_scenario.rs (glitchbook demo generator).

Run: python3 tests/data/make_fixtures_demo.py  (SciPy 1.17.1, NumPy 2.4.6)
Writes tests/data/demo_reference.json.
"""
import json
import numpy as np
from scipy import integrate, signal

out = {"tool": "SciPy %s / NumPy %s" % (__import__("scipy").__version__, np.__version__)}

# 1. Energy of a sine-Gaussian h = A exp(-(2 pi f0 t/Q)^2) sin(2 pi f0 t + phi):
#    scipy.integrate.quad over +-10 Q/(2 pi f0), epsabs=0, epsrel=1e-12, limit=2000.
energy = []
for a, f0, q, phi in [(1.0, 200.0, 10.0, 0.3), (2.5, 40.0, 20.0, 1.1), (1e-21, 500.0, 40.0, 2.0),
                      (1.0, 150.0, 3.0, 0.0)]:
    hw = 10 * q / (2 * np.pi * f0)
    h2 = lambda t: (a * np.exp(-(2 * np.pi * f0 * t / q) ** 2) * np.sin(2 * np.pi * f0 * t + phi)) ** 2
    val, err = integrate.quad(h2, -hw, hw, epsabs=0, epsrel=1e-12, limit=2000, points=[0.0])
    energy.append({"a": a, "f0_hz": f0, "q": q, "phase_rad": phi, "int_h2_dt": val})
out["sine_gaussian_energy"] = energy

# 2. One-sided PSD of the unit-variance AR(1) y[n] = a y[n-1] + sqrt(1-a^2) w[n]:
#    scipy.signal.freqz(b=[sqrt(1-a^2)], a=[1, -a], worN=f, fs=fs) gives H(f);
#    PSD = 2 |H|^2 / fs (unit-variance white input, one-sided).
ar1 = []
for a, fs in [(0.6, 2048.0), (0.9, 64.0), (0.0, 4096.0)]:
    f = np.array([1.0, 10.0, 100.0, 0.3 * fs])
    _, h = signal.freqz([np.sqrt(1 - a * a)], [1.0, -a], worN=f, fs=fs)
    ar1.append({"a": a, "fs_hz": fs, "f_hz": f.tolist(), "psd": (2 * np.abs(h) ** 2 / fs).tolist()})
out["ar1_psd"] = ar1

# 3. Matched-filter SNR of a sampled unit sine-Gaussian (t = i/fs, i = -m..m,
#    m = ceil(5 Q/(2 pi f0) fs)), zero-padded to N = next power of two >= max(len, fs),
#    with numpy.fft.rfft: rho^2 = 4 sum_{k>=1} w_k |rfft(h)_k / fs|^2 df / S(f_k),
#    w = 1/2 at Nyquist; S = 2/fs (unit white noise).
mf = []
for fs, f0, q, phi in [(4096.0, 300.0, 8.0, 0.7), (1024.0, 45.0, 15.0, 0.0)]:
    m = int(np.ceil(5 * q / (2 * np.pi * f0) * fs))
    t = np.arange(-m, m + 1) / fs
    h = np.exp(-(2 * np.pi * f0 * t / q) ** 2) * np.sin(2 * np.pi * f0 * t + phi)
    n = 1 << int(np.ceil(np.log2(max(len(h), int(np.ceil(fs))))))
    spec = np.fft.rfft(h, n) / fs
    df = fs / n
    w = np.ones(len(spec)); w[0] = 0; w[-1] = 0.5
    rho2 = np.sum(w * 4 * np.abs(spec) ** 2 * df / (2 / fs))
    mf.append({"fs_hz": fs, "f0_hz": f0, "q": q, "phase_rad": phi, "snr_white_unit": float(np.sqrt(rho2))})
out["matched_filter_white"] = mf

with open(__file__.replace("make_fixtures_demo.py", "demo_reference.json"), "w") as fh:
    json.dump(out, fh, indent=1)
print(json.dumps(out, indent=1))
