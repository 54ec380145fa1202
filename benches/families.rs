//! Families performance figures (prints them; harness = false).
//! Targets from the brief: one GMM fit (k = 8, full covariance) on
//! 100,000 × 24 standardised features ≤ 5 s; auto-k clustering of 100,000
//! triggers (features precomputed) ≤ 30 s; fingerprints ≥ 2,000 triggers/s.
//! Fingerprints are timed twice: on the real path (a dense bundle written
//! to a temporary directory, scanned into a catalogue, maps from
//! [`BundleMaps`]: whitening, windows, Q rows; features stored in SQLite)
//! and with a synthetic map source (the feature code alone).
//! Run: `cargo bench --bench families` (about a minute);
//! `cargo bench --bench families -- fingerprints` times the real path only.

use glitchbook::families::features::{fingerprint, SineGaussian, SineGaussianSource};
use glitchbook::families::gmm::{fit_auto_k, Gmm, GmmParams};
use glitchbook::families::pca::PcaModel;
use glitchbook::trigger::Trigger;
use ndarray::Array2;
use rand::{Rng, SeedableRng};
use rand_distr::{Distribution, StandardNormal};
use rayon::prelude::*;
use std::time::Instant;

/// `n × d` standardised blob data with `k` centres (seeded).
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
    // Standardise.
    let s = glitchbook::families::pca::Scaler::fit(x.view());
    s.apply(&mut x);
    x
}

/// Fingerprint rate on the real path: `minutes` of 4096 Hz coloured noise
/// (the demo's target PSD) with `per_s` sine-Gaussians a second (SNR 8-30,
/// 30-1500 Hz, Q 3-40), written as a bundle, scanned into a catalogue;
/// then every trigger with SNR ≥ 7 gets a fingerprint from the bundle.
fn fingerprints_from_bundle(minutes: f64, per_s: f64) {
    use glitchbook::demo::{amplitude_for_snr, colored_gaussian_noise, sine_gaussian, target_psd};
    let fs = 4096.0;
    let n = (minutes * 60.0 * fs) as usize;
    let t0 = 1_400_000_000.0;
    let mut rng = rand_xoshiro::Xoshiro256Plus::seed_from_u64(7);
    let mut x = colored_gaussian_noise(&mut rng, n, fs, &target_psd).unwrap();
    let n_inj = (per_s * minutes * 60.0) as usize;
    for _ in 0..n_inj {
        let tc = rng.gen_range(20.0..minutes * 60.0 - 20.0);
        let f0 = (rng.gen_range(30f64.ln()..1500f64.ln())).exp();
        let q = rng.gen_range(3.0..40.0);
        let snr = rng.gen_range(8.0..30.0);
        let phase = rng.gen_range(0.0..std::f64::consts::TAU);
        let a = amplitude_for_snr(snr, fs, f0, q, phase, &target_psd);
        let half = 4.0 * q / (2.0 * std::f64::consts::PI * f0);
        let (lo, hi) = (
            ((tc - half) * fs) as usize,
            (((tc + half) * fs) as usize).min(n),
        );
        for (i, v) in x.iter_mut().enumerate().take(hi).skip(lo) {
            *v += a * sine_gaussian(i as f64 / fs - tc, f0, q, phase);
        }
    }
    let dir = tempfile::tempdir().unwrap();
    glitchbook::io::write_npy(&dir.path().join("strain.npy"), &x, true).unwrap();
    drop(x);
    std::fs::write(
        dir.path().join("bundle.toml"),
        format!(
            "[[channel]]\nname = \"B1:STRAIN\"\nfile = \"strain.npy\"\nrate = {fs:.1}\nstart = {t0:.1}\nrole = \"target\"\n"
        ),
    )
    .unwrap();
    let bundle = glitchbook::io::Bundle::open(dir.path()).unwrap();
    let scan = glitchbook::scan::scan_channel(
        &bundle.channels[0],
        &glitchbook::scan::ScanParams::default(),
        None,
        &|_| {},
    )
    .unwrap();
    let n_triggers = scan.triggers.len();
    let mut conn = glitchbook::catalogue::open(&dir.path().join("c.db")).unwrap();
    glitchbook::catalogue::record_scans(&mut conn, &[(scan, dir.path().to_path_buf())], |_| Ok(()))
        .unwrap();
    let src = glitchbook::maps::BundleMaps::from_catalogue(&conn).unwrap();
    let t = Instant::now();
    let cpu0 = cpu_s();
    let done = glitchbook::families::compute_features(&mut conn, 7.0, &src).unwrap();
    let dt = t.elapsed().as_secs_f64();
    let cpu = cpu_s() - cpu0;
    println!(
        "fingerprint (real path): {minutes} min at {fs} Hz, {n_inj} injections, {} triggers; {done} fingerprints (SNR >= 7) in {dt:.2} s = {:.0} triggers/s incl. whitening and SQLite (target >= 2,000/s)",
        n_triggers,
        done as f64 / dt
    );
    println!(
        "  CPU time {cpu:.2} s = {:.0} fingerprints per CPU-second; with {} threads on idle cores that is {:.0} /s (wall figure above is load-dependent)",
        done as f64 / cpu,
        rayon::current_num_threads(),
        done as f64 / cpu * rayon::current_num_threads() as f64
    );
}

/// CPU time (user + system) of this process so far \[s\], from
/// /proc/self/stat (clock ticks of 10 ms).
fn cpu_s() -> f64 {
    let stat = std::fs::read_to_string("/proc/self/stat").unwrap_or_default();
    let rest = stat.rsplit(')').next().unwrap_or("");
    let f: Vec<&str> = rest.split_whitespace().collect();
    let tick = |i: usize| {
        f.get(i)
            .and_then(|v| v.parse::<f64>().ok())
            .unwrap_or(f64::NAN)
    };
    // Fields 14 and 15 (utime, stime) are at 11 and 12 after the ')'.
    (tick(11) + tick(12)) / 100.0
}

fn main() {
    println!(
        "families bench ({} rayon threads)",
        rayon::current_num_threads()
    );
    fingerprints_from_bundle(30.0, 1.0);
    if std::env::args().any(|a| a == "fingerprints") {
        return;
    }

    // Fingerprints.
    let n_fp = 4000;
    let mut rng = rand_xoshiro::Xoshiro256Plus::seed_from_u64(1);
    let mut src = SineGaussianSource {
        events: vec![],
        noise: true,
    };
    let trigs: Vec<Trigger> = (0..n_fp)
        .map(|i| {
            let t = 1.0e9 + 20.0 * i as f64;
            let f = rng.gen_range(30.0..1500.0);
            let q = rng.gen_range(3.0..30.0);
            src.events.push((
                "B:S".into(),
                SineGaussian {
                    t0_gps: t,
                    f0_hz: f,
                    q,
                    snr: 12.0,
                    drift_hz_per_s: 0.0,
                },
            ));
            Trigger {
                t_peak: t,
                t_start: t - 0.05,
                t_end: t + 0.05,
                f_peak: f,
                f_low: 0.8 * f,
                f_high: 1.2 * f,
                snr: 12.0,
                snr_eq: 12.0,
                q,
                energy: 73.0,
            }
        })
        .collect();
    let t0 = Instant::now();
    let n_ok = trigs
        .par_iter()
        .filter(|t| fingerprint(t, "B:S", &src).is_ok())
        .count();
    let dt = t0.elapsed().as_secs_f64();
    println!(
        "fingerprint (synthetic map source): {n_ok} triggers in {dt:.3} s = {:.0} triggers/s",
        n_ok as f64 / dt
    );

    // One GMM fit, k = 8, full covariance, 100,000 × 24.
    let x = blobs(100_000, 24, 8, 2);
    let t0 = Instant::now();
    let g = Gmm::fit(x.view(), &GmmParams::new(8, 0)).unwrap();
    println!(
        "GMM fit k=8 full 100000x24: {:.2} s ({} EM iterations, converged {}; target ≤ 5 s)",
        t0.elapsed().as_secs_f64(),
        g.n_iter,
        g.converged
    );

    // Auto-k (1..=12, BIC on a 20,000-row subset, refit on all rows).
    let t0 = Instant::now();
    let auto = fit_auto_k(x.view(), 12, &GmmParams::new(1, 0), 20_000, false).unwrap();
    println!(
        "auto-k GMM/BIC k=1..12 on 100000x24: {:.2} s, chose k = {} (truth 8; target ≤ 30 s with PCA below)",
        t0.elapsed().as_secs_f64(),
        auto.best.k()
    );

    let (resp, _) = auto.best.predict_proba(x.view());
    let groups = glitchbook::families::model::component_groups(&resp, auto.best.k(), 0.02);
    println!(
        "  components grouped into families (overlap ≥ 0.02): {}",
        groups.iter().max().map_or(0, |m| m + 1)
    );

    // PCA of the pooled maps (20,000 × 256 subset), part of the same step.
    let m = blobs(20_000, 256, 8, 3);
    let t0 = Instant::now();
    let p = PcaModel::fit(m.view(), 15).unwrap();
    println!(
        "PCA 20000x256 -> 15: {:.2} s (first ratio {:.3})",
        t0.elapsed().as_secs_f64(),
        p.explained_variance_ratio[0]
    );
}
