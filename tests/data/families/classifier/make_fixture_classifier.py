"""Reference for glitchbook's classifier (families::classifier): multinomial
logistic regression with an L2 penalty on z-scored features and their
squares and pairwise products, computed with scikit-learn.

Data: invented, 4 overlapping classes in 5 dimensions (the shape of the
classifier's input: log2 peak frequency, ln Q, ln fractional bandwidth,
drift, curvature), one class curved so a quadratic boundary helps. Seeded
with numpy.random.default_rng(20261202); 600 rows, the first 400 train,
the last 200 test.

Calls (scikit-learn 1.9.1, numpy 2.4.6):
    sc = StandardScaler().fit(X_train)
    pf = PolynomialFeatures(degree=2, include_bias=False)
    Z = pf.fit_transform(sc.transform(X))
    clf = LogisticRegression(C=1.0, tol=1e-10, max_iter=10000).fit(Z_train, y_train)
    (lbfgs, multinomial loss: sum of -ln p + 1/(2C) |W|^2, intercept not
    penalised, the same objective as linfa-logistic 0.8.1's
    MultiLogisticRegression with alpha = 1/C)
Writes fixture_classifier.json: X, y, n_train, the test accuracy, the test
probabilities, also for the linear model (degree 1).
"""
import json

import numpy as np
import sklearn
from sklearn.linear_model import LogisticRegression
from sklearn.preprocessing import PolynomialFeatures, StandardScaler

rng = np.random.default_rng(20261202)
n = 600
y = rng.integers(0, 4, size=n)
X = np.zeros((n, 5))
centres = np.array(
    [
        [6.5, 2.0, -0.5, 0.0, 0.0],
        [7.5, 1.5, -1.0, 0.6, 0.0],
        [6.0, 1.2, -0.2, 0.0, -0.7],
        [8.0, 2.5, -1.5, 0.0, 0.0],
    ]
)
for i in range(n):
    c = y[i]
    X[i] = centres[c] + rng.normal(0.0, 0.45, size=5)
    if c == 2:  # an arch: curvature follows the square of the frequency offset
        X[i, 4] += 0.8 * (X[i, 0] - 6.0) ** 2
n_train = 400

out = {
    "sklearn_version": sklearn.__version__,
    "numpy_version": np.__version__,
    "X": X.tolist(),
    "y": y.tolist(),
    "n_train": n_train,
    "C": 1.0,
    "models": {},
}
for degree in (1, 2):
    sc = StandardScaler().fit(X[:n_train])
    pf = PolynomialFeatures(degree=degree, include_bias=False)
    Z = pf.fit_transform(sc.transform(X))
    clf = LogisticRegression(C=1.0, tol=1e-10, max_iter=10000).fit(Z[:n_train], y[:n_train])
    p = clf.predict_proba(Z[n_train:])
    acc = float((clf.predict(Z[n_train:]) == y[n_train:]).mean())
    out["models"]["quadratic" if degree == 2 else "linear"] = {
        "test_accuracy": acc,
        "test_proba": p.tolist(),
    }
    print(degree, acc)

with open("fixture_classifier.json", "w") as f:
    json.dump(out, f)
