"""Fixtures for glitchbook's rates module (tests/rates_*.rs).

Run from this directory:  python3 make_fixtures_rates.py
Needs SciPy 1.17.1, NumPy 2.4.6, Astropy 8.0.2.
"""
import json

import numpy as np
import scipy
import astropy
from scipy.stats import chi2, norm
from astropy.stats import bayesian_blocks

# 1. Exact Poisson confidence limits (Gehrels 1986, ApJ 303, 336, eqs. for
#    the chi-square form): upper = 0.5*chi2.ppf(CL, 2(n+1)),
#    lower = 0.5*chi2.ppf(1-CL, 2n) (0 for n = 0).
# Gehrels' "0.8413" column is the Gaussian 1-sigma level norm.cdf(1).
levels = [float(norm.cdf(1.0)), 0.8413, 0.90, 0.95, 0.975, 0.99, 0.995, 0.999]
rows = []
for cl in levels:
    for n in range(0, 51):
        up = 0.5 * chi2.ppf(cl, 2 * (n + 1))
        lo = 0.0 if n == 0 else 0.5 * chi2.ppf(1 - cl, 2 * n)
        rows.append({"cl": cl, "n": n, "lower": float(lo), "upper": float(up)})
with open("gehrels_chi2.json", "w") as f:
    json.dump({"source": f"scipy {scipy.__version__} scipy.stats.chi2.ppf",
               "rows": rows}, f, indent=1)

# 2. Bayesian blocks change points, astropy.stats.bayesian_blocks(t,
#    fitness='events', p0=p0). Event lists with fixed seeds.
rng = np.random.default_rng(20261202)
cases = []

def add(name, t, p0):
    t = np.asarray(t, dtype=float)
    edges = bayesian_blocks(t, fitness="events", p0=p0)
    cases.append({"name": name, "p0": p0, "t": [float(v) for v in t],
                  "edges": [float(e) for e in edges]})

# uniform Poisson process, no change expected
add("uniform_200", np.sort(rng.uniform(0, 1000, 200)), 0.05)
# rate step: 1 per 10 s for 2000 s, then 1 per s for 500 s
a = np.sort(rng.uniform(0, 2000, 200))
b = np.sort(rng.uniform(2000, 2500, 500))
add("step_up", np.concatenate([a, b]), 0.05)
add("step_up_p0_0.01", np.concatenate([a, b]), 0.01)
# step down then back up, plus GPS-like offset
c = 1.4e9 + np.sort(np.concatenate([rng.uniform(0, 500, 300),
                                     rng.uniform(500, 3000, 50),
                                     rng.uniform(3000, 3400, 200)]))
add("down_up_gps", c, 0.05)
# ties / repeated times (times rounded to whole seconds)
d = np.round(np.sort(np.concatenate([rng.uniform(0, 300, 150),
                                     rng.uniform(300, 400, 300)])))
add("ties_rounded", d, 0.05)
# explicit repeats of single times
e = np.array([1, 2, 2, 2, 3, 5, 8, 8, 13, 21, 21, 21, 21, 34, 55, 55, 89], float)
add("ties_fibonacci", e, 0.2)
# a burst in a quiet background
f = np.sort(np.concatenate([rng.uniform(0, 10000, 100), rng.uniform(4000, 4050, 40)]))
add("burst", f, 0.05)
add("burst_p0_0.3", f, 0.3)
with open("bayesian_blocks_events.json", "w") as fh:
    json.dump({"source": f"astropy {astropy.__version__} "
               "astropy.stats.bayesian_blocks(t, fitness='events', p0=p0); "
               f"numpy {np.__version__}",
               "cases": cases}, fh)
