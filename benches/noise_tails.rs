//! Tail of the normalised tile energy in white Gaussian noise, per Q plane
//! and row band: the fraction of kept tiles at or above z over exp(−z)
//! (Chatterji et al. 2004: with a known scale Z is exponential with mean 1),
//! for z = 8, 12, 14, 16, of the raw energy and of the tile significance the
//! scan thresholds ([`glitchbook::tf::tile_significance`], which accounts
//! for each row's scale being counted from a finite number of tiles). A
//! ratio above 1 is excess noise triggers.
//!
//! Blocks are independent stretches of noise (each seeded on its own), so
//! long runs need no memory beyond the blocks in flight and use all cores.
//!
//! Run: `cargo bench --bench noise_tails` (GLITCHBOOK_BENCH_BLOCK_S sets the
//! block length, default 32 s; GLITCHBOOK_BENCH_SECONDS the noise analysed,
//! default 36000 s, i.e. 10 h of kept data; GLITCHBOOK_BENCH_EXPECTED=1
//! normalises rows by the PSD-based expectation instead of the measured
//! scale).

mod common;

use glitchbook::tails::{Tally, BANDS_HZ, ZS};
use std::time::Instant;

fn main() {
    let block = common::env_f64("GLITCHBOOK_BENCH_BLOCK_S").unwrap_or(32.0);
    let secs = common::env_f64("GLITCHBOOK_BENCH_SECONDS").unwrap_or(36000.0);
    let expected = std::env::var("GLITCHBOOK_BENCH_EXPECTED").is_ok();
    let t = Instant::now();
    let (planes, tally) = glitchbook::tails::white_noise_tails(
        common::TILING,
        common::HIGHPASS,
        4096.0,
        block,
        secs,
        expected,
        7,
    );
    println!(
        "noise tails: {secs} s of kept white noise at 4096 Hz in independent {block}-s blocks, \
         rows normalised by the {} scale ({:.0} s wall)",
        if expected {
            "PSD-based expected"
        } else {
            "measured"
        },
        t.elapsed().as_secs_f64()
    );
    println!(
        "  fraction of kept tiles at or above z over exp(-z), z = {:?}: raw energy | significance \
         ± standard error (from the scatter between blocks; tiles above z = 16 by significance)",
        ZS
    );
    for (p, q) in planes.iter().enumerate() {
        for (b, band) in BANDS_HZ.iter().enumerate() {
            let t: &Tally = &tally[p][b];
            if t.tiles == 0 {
                continue;
            }
            let fmt = |c: &[u64; 4]| {
                (0..4)
                    .map(|k| format!("{:5.2}", t.ratio(c[k], ZS[k])))
                    .collect::<Vec<_>>()
                    .join(" ")
            };
            let err = (0..4)
                .map(|k| format!("{:4.2}", t.sig_ratio_error(k)))
                .collect::<Vec<_>>()
                .join(" ");
            println!(
                "  Q {q:5.1}, {:4.0}-{:4.0} Hz: {} | {} ± {}  ({} tiles, {} at 16)",
                band.0,
                band.1,
                fmt(&t.raw),
                fmt(&t.sig),
                err,
                t.tiles,
                t.sig[3]
            );
        }
    }
}
