"""Reference tail probabilities for glitchbook's coupling tests.

Run from this directory:  python3 make_fixtures_coupling.py
Writes poisson_sf.json and binom_sf.json.

P(N >= n) = scipy.stats.poisson.sf(n - 1, mu)   (SciPy 1.17.1)
ln P(N >= n) = scipy.stats.poisson.logsf(n - 1, mu)
P(X >= k) = scipy.stats.binom.sf(k - 1, n, p), logsf likewise.
Rows where SciPy's logsf underflows to -inf (tails beyond ~1e-308) are
instead computed with mpmath 1.3.0 at 50 digits:
  poisson: mpmath.gammainc(n, 0, mu, regularized=True)
  binom:   mpmath.fsum(mpmath.binomial(n, j) * p**j * (1 - p)**(n - j)
                       for j in range(k, n + 1))
and marked "source": "mpmath".
"""
import json
import math

import mpmath
import numpy as np
import scipy
import scipy.stats as st

mpmath.mp.dps = 50
LN10 = math.log(10.0)


def poisson_row(n, mu):
    lsf = float(st.poisson.logsf(n - 1, mu))
    src = f"scipy {scipy.__version__} poisson.logsf({n - 1}, {mu})"
    if not np.isfinite(lsf):
        lsf = float(mpmath.log(mpmath.gammainc(n, 0, mu, regularized=True)))
        src = f"mpmath {mpmath.__version__} gammainc({n}, 0, {mu}, regularized=True)"
    return {
        "n": n,
        "mu": mu,
        "sf": float(st.poisson.sf(n - 1, mu)),
        "ln_sf": lsf,
        "neg_log10_sf": -lsf / LN10,
        "source": src,
    }


def binom_row(k, n, p):
    lsf = float(st.binom.logsf(k - 1, n, p))
    src = f"scipy {scipy.__version__} binom.logsf({k - 1}, {n}, {p})"
    if not np.isfinite(lsf):
        pm = mpmath.mpf(p)
        tail = mpmath.fsum(mpmath.binomial(n, j) * pm**j * (1 - pm) ** (n - j)
                           for j in range(k, n + 1))
        lsf = float(mpmath.log(tail))
        src = f"mpmath {mpmath.__version__} exact sum of binomial pmf from {k} to {n}"
    return {
        "k": k,
        "n": n,
        "p": p,
        "sf": float(st.binom.sf(k - 1, n, p)),
        "ln_sf": lsf,
        "source": src,
    }


pois = []
for n in [1, 2, 3, 5, 10, 20, 50, 100, 200, 1000]:
    for mu in [1e-6, 0.01, 0.5, 1.0, 3.0, 10.0, 50.0, 100.0, 1000.0, 1e4]:
        pois.append(poisson_row(n, mu))
# Near the mean of large counts (the veto-round regime) and huge excesses.
for n, mu in [(20000, 19000.0), (15000, 20000.0), (19999, 20000.0), (2000, 1200.5),
              (7, 6.999), (50, 1.0), (5000, 1.0), (300, 2.5)]:
    pois.append(poisson_row(n, mu))

binom = []
for n in [10, 100, 1000, 20000]:
    for p in [1e-6, 1e-3, 0.05, 0.3, 0.5, 0.9]:
        for k in sorted({1, 2, 5, max(1, n // 10), n // 2, n}):
            binom.append(binom_row(k, n, p))

with open("poisson_sf.json", "w") as f:
    json.dump(pois, f, indent=1)
with open("binom_sf.json", "w") as f:
    json.dump(binom, f, indent=1)
print(len(pois), "poisson rows;", len(binom), "binomial rows")
