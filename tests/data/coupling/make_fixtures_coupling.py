"""Reference tail probabilities for glitchbook's coupling tests.

Run from this directory:  python3 make_fixtures_coupling.py
Writes poisson_sf.json, binom_sf.json and safety_cases.json.

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

# Safety decisions: k of n injections inside a veto of this deadtime.
# binom_p = scipy.stats.binom.sf(k - 1, n, deadtime)     (decides)
# poisson_p = scipy.stats.poisson.sf(k - 1, n * deadtime) (reference)
# unsafe when binom_p < limit (1e-5, common practice).
LIMIT = 1e-5
safety = []
for k, n, d, note in [
    (25, 50, 0.205, "issue 13: deadtime 0.205, 25 of 50 vetoed"),
    (25, 50, 0.2045, "issue 13 quoted figures (10.2 expected: 3.2e-6 vs 6.6e-5)"),
    (0, 30, 0.01, "nothing vetoed"),
    (1, 30, 0.01, ""),
    (3, 100, 0.01, ""),
    (6, 100, 0.01, "near the limit"),
    (7, 100, 0.01, "near the limit"),
    (20, 20, 0.002, "every injection vetoed"),
    (12, 300, 0.005, ""),
    (40, 200, 0.08, ""),
    (45, 200, 0.08, "near the limit"),
    (60, 100, 0.3, "large deadtime"),
    (55, 100, 0.3, "large deadtime"),
    (120, 1000, 0.08, ""),
    (130, 1000, 0.08, ""),
]:
    b = float(st.binom.sf(k - 1, n, d))
    p = float(st.poisson.sf(k - 1, n * d))
    safety.append({
        "k": k, "n": n, "deadtime": d, "binom_p": b, "poisson_p": p,
        "limit": LIMIT, "unsafe": b < LIMIT, "poisson_says_unsafe": p < LIMIT,
        "note": note,
        "source": f"scipy {scipy.__version__} binom.sf({k - 1}, {n}, {d}); "
                  f"poisson.sf({k - 1}, {n * d})",
    })

with open("safety_cases.json", "w") as f:
    json.dump(safety, f, indent=1)
with open("poisson_sf.json", "w") as f:
    json.dump(pois, f, indent=1)
with open("binom_sf.json", "w") as f:
    json.dump(binom, f, indent=1)
print(len(pois), "poisson rows;", len(binom), "binomial rows")
