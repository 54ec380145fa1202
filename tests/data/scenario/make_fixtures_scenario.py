"""Fixtures for the scenario scoring metrics (run: python3 make_fixtures_scenario.py).
scikit-learn 1.9.1, NumPy 2.4.6 (versions recorded in the output)."""
import json
import numpy as np
import sklearn
from sklearn.metrics import adjusted_rand_score, homogeneity_completeness_v_measure

rng = np.random.default_rng(2024)
cases = [
    # small hand-made cases
    ([0, 0, 1, 1], [0, 0, 1, 1]),
    ([0, 0, 1, 1], [1, 1, 0, 0]),
    ([0, 0, 0, 1, 1, 1], [0, 0, 1, 1, 2, 2]),
    ([0, 0, 1, 1, 2, 2], [0, 0, 0, 0, 0, 0]),
    ([0, 0, 1, 1, 2, 2], [0, 1, 2, 3, 4, 5]),
    ([3, 3, 3, 7, 7, 9, 9, 9, 9], [1, 1, 2, 2, 2, -1, -1, 5, 5]),
]
# a shattered mechanism: true class 0 split over 3 clusters, others intact
t = [0] * 30 + [1] * 20 + [2] * 10
p = [10] * 10 + [11] * 10 + [12] * 10 + [20] * 20 + [30] * 10
cases.append((t, p))
# random labellings of several sizes, with a noisy copy of the truth
for n, kt, kp, noise in [(50, 3, 4, 0.3), (400, 5, 9, 0.2), (1000, 6, 6, 0.5)]:
    truth = rng.integers(0, kt, n)
    pred = np.where(rng.random(n) < noise, rng.integers(0, kp, n), truth * 7 - 3)
    cases.append((truth.tolist(), pred.tolist()))

out = {
    "call": "homogeneity_completeness_v_measure(labels_true, labels_pred, beta=1.0); adjusted_rand_score(labels_true, labels_pred)",
    "sklearn": sklearn.__version__,
    "numpy": np.__version__,
    "cases": [],
}
for t, p in cases:
    h, c, v = homogeneity_completeness_v_measure(t, p, beta=1.0)
    out["cases"].append({
        "labels_true": [int(x) for x in t],
        "labels_pred": [int(x) for x in p],
        "homogeneity": float(h),
        "completeness": float(c),
        "v_measure": float(v),
        "ari": float(adjusted_rand_score(t, p)),
    })
with open("fixtures_scenario.json", "w") as f:
    cases = out.pop("cases")
    head = json.dumps(out)[:-1]
    f.write(head + ', "cases": [\n' + ",\n".join(json.dumps(c) for c in cases) + "\n]}\n")
print(len(cases), "cases")
