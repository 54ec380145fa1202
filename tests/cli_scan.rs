//! `glitchbook scan` end to end on a small synthetic bundle.
use crate::cli_util::{count, Dir};
use rand::SeedableRng;
use rand_distr::{Distribution, Normal};

const RATE: f64 = 1024.0;
const START: f64 = 1_400_000_000.0;
const T_GLITCH: f64 = START + 40.0;

/// A bundle with one target channel: 64 s of unit white Gaussian noise
/// (seeded) plus a loud sine-Gaussian (Q = 9, 100 Hz) at `T_GLITCH`.
fn bundle(d: &Dir) {
    let n = (64.0 * RATE) as usize;
    let mut rng = rand_xoshiro::Xoshiro256Plus::seed_from_u64(7);
    let normal = Normal::new(0.0, 1.0).unwrap();
    let f0 = 100.0;
    let tau = 9.0 / (2.0_f64.sqrt() * std::f64::consts::PI * f0);
    let x: Vec<f64> = (0..n)
        .map(|i| {
            let t = START + i as f64 / RATE - T_GLITCH;
            normal.sample(&mut rng)
                + 4.0 * (-(t / tau).powi(2)).exp() * (2.0 * std::f64::consts::PI * f0 * t).sin()
        })
        .collect();
    std::fs::create_dir_all(d.path().join("b")).unwrap();
    glitchbook::io::write_npy(&d.path().join("b/strain.npy"), &x, false).unwrap();
    d.write(
        "b/bundle.toml",
        &format!(
            "[[channel]]\nname = \"Z1:STRAIN\"\nfile = \"strain.npy\"\nrate = {RATE}\n\
             start = {START}\nrole = \"target\"\n"
        ),
    );
}

#[test]
fn unknown_channel_named_in_error() {
    let d = Dir::new();
    bundle(&d);
    let out = d.run(&["scan", "b", "--channel", "Z1:NOPE"]);
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("bundle.toml") && err.contains("Z1:NOPE") && err.contains("Z1:STRAIN"),
        "{err}"
    );
    assert!(!d.db().exists());
}

#[test]
fn scan_finds_glitch_and_rerun_is_skipped() {
    let d = Dir::new();
    bundle(&d);
    d.ok(&["scan", "b", "--fmin", "20", "--fmax", "400"]);
    let json: serde_json::Value =
        serde_json::from_str(&d.ok(&["triggers", "--min-snr", "8", "--format", "json"])).unwrap();
    // The injected sine-Gaussian is found within its duration (tau ≈ 20 ms).
    assert!(
        json.as_array()
            .unwrap()
            .iter()
            .any(|t| (t["t_peak"].as_f64().unwrap() - T_GLITCH).abs() < 0.1),
        "{json}"
    );
    let before = d.checksum();
    let out = d.run(&["scan", "b", "--fmin", "20", "--fmax", "400"]);
    assert!(out.status.success());
    assert!(String::from_utf8_lossy(&out.stderr).contains("skipped"));
    assert_eq!(before, d.checksum());
    assert_eq!(count(&d.db(), "scans"), 1);
}
