"""Fixtures for the families module (run: python3 make_fixtures_families.py).
scikit-learn 1.9.1, NumPy 2.4.6."""
import json
import numpy as np
from sklearn.datasets import load_iris, make_blobs
from sklearn.cluster import KMeans
from sklearn.decomposition import PCA
from sklearn.mixture import GaussianMixture
from sklearn.metrics import adjusted_rand_score

out = {}
iris = load_iris()
km = KMeans(n_clusters=3, n_init=10, random_state=0).fit(iris.data)
out["iris_kmeans"] = {
    "call": "KMeans(n_clusters=3, n_init=10, random_state=0).fit(load_iris().data).inertia_",
    "inertia": float(km.inertia_),
    "ari_vs_species": float(adjusted_rand_score(iris.target, km.labels_)),
    "x": iris.data.tolist(),
    "species": iris.target.tolist(),
}
# linfa-datasets 0.8.1 ships the UCI copy of Iris, which differs from
# scikit-learn's corrected copy in samples 35 and 38 (Bezdek et al. 1999);
# the same scikit-learn call on linfa's copy:
import glob, gzip, os
lp = glob.glob(os.path.expanduser("~/.cargo/registry/src/*/linfa-datasets-0.8.1/data/iris.csv.gz"))[0]
lx = np.loadtxt(gzip.open(lp), delimiter=",", skiprows=1)[:, :4]
kml = KMeans(n_clusters=3, n_init=10, random_state=0).fit(lx)
out["iris_kmeans_linfa_copy"] = {
    "call": "KMeans(n_clusters=3, n_init=10, random_state=0).fit(linfa-datasets 0.8.1 iris.csv.gz[:, :4]).inertia_",
    "inertia": float(kml.inertia_),
    "ari_vs_species": float(adjusted_rand_score(iris.target, kml.labels_)),
}

rng = np.random.default_rng(7)
mix = rng.normal(size=(6, 6))
x = rng.normal(size=(40, 6)) @ mix
pca = PCA(n_components=4).fit(x)
out["pca"] = {
    "call": "PCA(n_components=4).fit(X).explained_variance_ratio_ ; X = default_rng(7): mix=normal((6,6)); X=normal((40,6))@mix",
    "x": x.tolist(),
    "explained_variance_ratio": pca.explained_variance_ratio_.tolist(),
    "explained_variance": pca.explained_variance_.tolist(),
}

xb, yb = make_blobs(n_samples=600, centers=3, n_features=2, cluster_std=[0.6, 1.0, 0.8], random_state=3)
bics = []
for k in range(1, 6):
    g = GaussianMixture(n_components=k, covariance_type="full", random_state=0, n_init=3).fit(xb)
    bics.append(float(g.bic(xb)))
g3 = GaussianMixture(n_components=3, covariance_type="full", random_state=0, n_init=3).fit(xb)
order = np.argsort(g3.means_[:, 0])
out["gmm"] = {
    "call": "make_blobs(n_samples=600, centers=3, n_features=2, cluster_std=[0.6,1.0,0.8], random_state=3); "
            "GaussianMixture(n_components=k, covariance_type='full', random_state=0, n_init=3).fit(X): bic(X), means_, weights_, covariances_, score(X) (k=3; sorted by mean x)",
    "x": xb.tolist(),
    "y": yb.tolist(),
    "bic_k1_to_k5": bics,
    "means": g3.means_[order].tolist(),
    "weights": g3.weights_[order].tolist(),
    "covariances": g3.covariances_[order].tolist(),
    "mean_loglik": float(g3.score(xb)),
}

a = [0, 0, 0, 1, 1, 1, 2, 2, 2, 2]
b = [1, 1, 0, 0, 2, 2, 2, 2, 0, 1]
c = [5, 5, 5, 7, 7, 7, 9, 9, 9, 9]
out["ari"] = {
    "call": "adjusted_rand_score(a, b)",
    "cases": [
        {"a": a, "b": b, "ari": float(adjusted_rand_score(a, b))},
        {"a": a, "b": c, "ari": float(adjusted_rand_score(a, c))},
        {"a": list(iris.target), "b": list(km.labels_), "ari": float(adjusted_rand_score(iris.target, km.labels_))},
    ],
}
out["ari"]["cases"][2]["a"] = [int(v) for v in out["ari"]["cases"][2]["a"]]
out["ari"]["cases"][2]["b"] = [int(v) for v in out["ari"]["cases"][2]["b"]]

with open("fixtures_families.json", "w") as f:
    json.dump(out, f)
print(out["iris_kmeans"], out["pca"]["explained_variance_ratio"], out["gmm"]["bic_k1_to_k5"], out["gmm"]["weights"])
