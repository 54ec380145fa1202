"""Reference values for tests/cli_coupling_rates.rs (SciPy 1.17.1).

The test catalogue (built in the test): 100 target triggers, 2000 s analysed;
40 of them witnessed by an aux channel at lag 0.02 s and SNR 25. The best
witness combination (threshold 20, window +-0.05 s) vetoes 40 windows of
0.1 s: deadtime 4/2000 = 0.002, expected = 100 * 0.002 = 0.2 coincidences,
observed 40. Rates: 25 triggers per 500 s bin (live 500 s), CL 0.9.
Re-run: python3 tests/data/cli/make_fixtures_cli_coupling.py
"""
import json
import math
import os

import scipy
from scipy.stats import chi2, poisson

out = {
    "scipy_version": scipy.__version__,
    "witness": {
        "call": "-scipy.stats.poisson.logsf(39, 0.2) / math.log(10)",
        "n_coinc": 40,
        "expected": 0.2,
        "significance": float(-poisson.logsf(39, 0.2) / math.log(10)),
    },
    "unsafe_veto": {
        "call": "scipy.stats.poisson.sf(19, 20 * 0.002)",
        "n_inj": 20,
        "n_inj_vetoed": 20,
        "safety_p": float(poisson.sf(19, 20 * 0.002)),
    },
    "rate_bin": {
        "call": "chi2.ppf(0.1, 2*25)/2 and chi2.ppf(0.9, 2*26)/2, times 3600/500 (Gehrels 1986 chi-square form)",
        "count": 25,
        "live_s": 500.0,
        "rate_per_hour": 25 * 3600 / 500,
        "lower_per_hour": float(chi2.ppf(0.1, 50) / 2 * 3600 / 500),
        "upper_per_hour": float(chi2.ppf(0.9, 52) / 2 * 3600 / 500),
    },
}
path = os.path.join(os.path.dirname(os.path.abspath(__file__)), "cli_coupling.json")
with open(path, "w") as f:
    json.dump(out, f, indent=2)
    f.write("\n")
print(json.dumps(out, indent=2))
