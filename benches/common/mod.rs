//! Helpers shared by the bench binaries (each includes this with `mod common;`).
#![allow(dead_code)]

use glitchbook::scan::InMemory;
use glitchbook::tf::Tiling;
use rand::SeedableRng;
use rand_distr::{Distribution, StandardNormal};

/// `secs` of white Gaussian noise of standard deviation `sigma` at `fs_hz`
/// from GPS `start_gps`, seeded.
pub fn white_noise(secs: f64, fs_hz: f64, sigma: f64, start_gps: f64, seed: u64) -> InMemory {
    let mut rng = rand_xoshiro::Xoshiro256Plus::seed_from_u64(seed);
    let data = (0..(fs_hz * secs) as usize)
        .map(|_| {
            let z: f64 = StandardNormal.sample(&mut rng);
            sigma * z
        })
        .collect();
    InMemory {
        data,
        rate_hz: fs_hz,
        start_gps,
    }
}

/// A number from the environment variable `name`, if set and valid.
pub fn env_f64(name: &str) -> Option<f64> {
    std::env::var(name).ok().and_then(|s| s.parse().ok())
}

/// The benchmark plan: fmin 16, fmax 1024, Q 4–64, mismatch 0.2
/// (the plan the noise tails are calibrated on).
pub const TILING: Tiling = glitchbook::tails::STANDARD_TILING;

/// The scan's high-pass for that plan: raised cosine from fmin/2 to 0.9 fmin \[Hz\].
pub const HIGHPASS: (f64, f64) = glitchbook::tails::STANDARD_HIGHPASS;
