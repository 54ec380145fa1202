//! Why families/gmm.rs keeps its own Gaussian mixture instead of
//! linfa-clustering's `GaussianMixtureModel` (prints figures; harness = false):
//! accuracy against scikit-learn on the fixture the families tests use, and
//! speed on the families bench data (100,000 × 24, k = 8, full covariance).
//! Both fits start from seeded k-means, use `reg_covar` 1e-6, tolerance 1e-3
//! and at most 100 EM iterations; both log-likelihoods are scored by the
//! same code (our `Gmm::score_samples` on each fit's parameters).
//! Run: `cargo bench --bench gmm_linfa` (a few minutes: linfa's fit is the slow part).

use glitchbook::families::gmm::{cholesky, Gmm, GmmParams};
use linfa::traits::Fit;
use linfa::DatasetBase;
use linfa_clustering::GaussianMixtureModel;
use ndarray::{Array2, ArrayView2};
use rand::{Rng, SeedableRng};
use rand_distr::{Distribution, StandardNormal};
use std::time::Instant;

/// `n × d` blob data with `k` centres (seeded), standardised: the families
/// bench's data.
fn blobs(n: usize, d: usize, k: usize, seed: u64) -> Array2<f64> {
    let mut rng = rand_xoshiro::Xoshiro256Plus::seed_from_u64(seed);
    let centres: Vec<Vec<f64>> = (0..k)
        .map(|_| (0..d).map(|_| rng.gen_range(-4.0..4.0)).collect())
        .collect();
    let mut x = Array2::zeros((n, d));
    for i in 0..n {
        let c = &centres[i % k];
        for j in 0..d {
            let z: f64 = StandardNormal.sample(&mut rng);
            x[[i, j]] = c[j] + z;
        }
    }
    let s = glitchbook::families::pca::Scaler::fit(x.view());
    s.apply(&mut x);
    x
}

/// linfa's fit as one of our `Gmm`s (for scoring with the same code).
fn linfa_fit(x: ArrayView2<f64>, k: usize, n_runs: u64) -> (Gmm, f64) {
    let ds = DatasetBase::from(x.to_owned());
    let t0 = Instant::now();
    let m = GaussianMixtureModel::params(k)
        .n_runs(n_runs)
        .tolerance(1e-3)
        .reg_covariance(1e-6)
        .max_n_iterations(100)
        .with_rng(rand_xoshiro::Xoshiro256Plus::seed_from_u64(0))
        .fit(&ds)
        .expect("linfa GMM fit");
    let secs = t0.elapsed().as_secs_f64();
    let d = x.ncols();
    let covariances: Vec<Vec<f64>> = (0..k)
        .map(|c| {
            m.covariances()
                .index_axis(ndarray::Axis(0), c)
                .iter()
                .copied()
                .collect()
        })
        .collect();
    let chol = covariances
        .iter()
        .map(|c| cholesky(c, d).expect("positive definite"))
        .collect();
    let g = Gmm {
        dim: d,
        weights: m.weights().to_vec(),
        means: m.means().outer_iter().map(|r| r.to_vec()).collect(),
        covariances,
        chol,
        mean_loglik: 0.0,
        converged: true,
        n_iter: 0,
        diagonal: false,
    };
    (g, secs)
}

fn mean_loglik(g: &Gmm, x: ArrayView2<f64>) -> f64 {
    let ll = g.score_samples(x);
    ll.iter().sum::<f64>() / ll.len() as f64
}

fn main() {
    // Accuracy: scikit-learn 1.9.1 GaussianMixture(n_components=3,
    // covariance_type='full', random_state=0, n_init=3) on
    // make_blobs(n_samples=600, random_state=3): mean log-likelihood
    // -3.4498196840941766 (tests/data/families/fixtures_families.json).
    let f: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(
            std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
                .join("tests/data/families/fixtures_families.json"),
        )
        .expect("fixture"),
    )
    .expect("json");
    let rows: Vec<Vec<f64>> = serde_json::from_value(f["gmm"]["x"].clone()).unwrap();
    let x = Array2::from_shape_fn((rows.len(), 2), |(i, j)| rows[i][j]);
    let want = f["gmm"]["mean_loglik"].as_f64().unwrap();
    let ours = Gmm::fit(
        x.view(),
        &GmmParams {
            n_init: 3,
            ..GmmParams::new(3, 0)
        },
    )
    .unwrap();
    let (lin, _) = linfa_fit(x.view(), 3, 3);
    println!(
        "sklearn blobs 600x2, k=3: mean log-likelihood scikit-learn {want:.6}, ours {:.6} (diff {:.1e}), linfa {:.6} (diff {:.1e})",
        mean_loglik(&ours, x.view()),
        (mean_loglik(&ours, x.view()) - want).abs(),
        mean_loglik(&lin, x.view()),
        (mean_loglik(&lin, x.view()) - want).abs()
    );

    // Speed: the families bench's one-fit figure.
    let x = blobs(100_000, 24, 8, 2);
    let t0 = Instant::now();
    let ours = Gmm::fit(x.view(), &GmmParams::new(8, 0)).unwrap();
    let t_ours = t0.elapsed().as_secs_f64();
    println!(
        "100000x24, k=8 full: ours {t_ours:.2} s ({} EM iterations), mean log-likelihood {:.4}",
        ours.n_iter,
        mean_loglik(&ours, x.view())
    );
    let t0 = Instant::now();
    let ours4 = Gmm::fit(
        x.view(),
        &GmmParams {
            n_init: 4,
            ..GmmParams::new(8, 0)
        },
    )
    .unwrap();
    println!(
        "100000x24, k=8 full: ours with 4 seeded starts {:.2} s, mean log-likelihood {:.4}",
        t0.elapsed().as_secs_f64(),
        mean_loglik(&ours4, x.view())
    );
    let (lin, t_lin) = linfa_fit(x.view(), 8, 1);
    println!(
        "100000x24, k=8 full: linfa-clustering 0.8.1 {t_lin:.2} s, mean log-likelihood {:.4}; linfa / ours = {:.1}x",
        mean_loglik(&lin, x.view()),
        t_lin / t_ours
    );
}
