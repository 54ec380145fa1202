//! Tail of the normalised tile energy in white Gaussian noise, per Q plane:
//! the fraction of kept tiles with Z ≥ z over exp(−z) (Chatterji et al.
//! 2004: Z is exponential with mean 1), for z = 4, 8, 12, 16, over every
//! row and over the rows below 64 Hz. A ratio above 1 is excess noise
//! triggers; it comes from the uncertainty of each row's measured scale.
//!
//! Run: `cargo bench --bench noise_tails` (GLITCHBOOK_BENCH_BLOCK_S sets the
//! block length, default 32 s; GLITCHBOOK_BENCH_SECONDS the span, default
//! 3600 s). With `GLITCHBOOK_BENCH_EXPECTED=1` rows are normalised by the
//! PSD-based expectation instead of the measured scale.

mod common;

use glitchbook::scan::Conditioner;
use glitchbook::tf::QPlan;

fn main() {
    let block = common::env_f64("GLITCHBOOK_BENCH_BLOCK_S").unwrap_or(32.0);
    let secs = common::env_f64("GLITCHBOOK_BENCH_SECONDS").unwrap_or(3600.0);
    let expected = std::env::var("GLITCHBOOK_BENCH_EXPECTED").is_ok();
    let (fs, pad_s) = (4096.0, 2.0);
    let n = (fs * secs) as usize;
    let src = common::white_noise(secs, fs, 1e-21, 0.0, 7);
    let (bn, pad) = ((block * fs) as usize, (pad_s * fs) as usize);
    let tiling = common::TILING;
    let highpass = common::HIGHPASS;
    let plan = QPlan::new(fs, bn, &tiling, highpass, &mut rustfft::FftPlanner::new()).unwrap();
    let cond = Conditioner::new(bn, fs, pad, 4096, highpass)
        .unwrap()
        .with_top(plan.top_hz());
    let (mut cb, mut ws) = (cond.buffers(), plan.workspace());
    let zs = [4.0f32, 8.0, 12.0, 16.0];
    let np = plan.planes.len();
    // [plane][all rows, rows below 64 Hz] → (tiles, counts above each z)
    let mut tally = vec![[(0u64, [0u64; 4]); 2]; np];
    let mut i0 = 0;
    while i0 + bn <= n {
        cond.whiten_block_with(&src, i0, &mut cb).unwrap();
        let t0 = i0 as f64 / fs;
        let keep = (t0 + pad_s, t0 + block - pad_s);
        for (p, plane) in plan.planes.iter().enumerate() {
            for (r, row) in plane.rows.iter().enumerate() {
                let (e, dt) = if expected {
                    plan.row_energies_expected(p, r, &cb.whitened, &mut ws)
                } else {
                    plan.row_energies(p, r, &cb.whitened, t0, keep, &mut ws)
                };
                let kept = e.iter().enumerate().filter(|(i, _)| {
                    let t = t0 + *i as f64 * dt;
                    t >= keep.0 && t < keep.1
                });
                for (_, &z) in kept {
                    for (g, take) in [true, row.f_hz < 64.0].into_iter().enumerate() {
                        if take {
                            tally[p][g].0 += 1;
                            for (k, &zt) in zs.iter().enumerate() {
                                tally[p][g].1[k] += u64::from(z >= zt);
                            }
                        }
                    }
                }
            }
        }
        i0 += bn - 2 * pad;
    }
    println!(
        "noise tails: {secs} s of white noise at {fs} Hz, block {block} s, rows normalised by the {} scale",
        if expected { "PSD-based expected" } else { "measured" }
    );
    println!("  fraction of kept tiles with Z >= z over exp(-z), z = 4, 8, 12, 16");
    for (p, plane) in plan.planes.iter().enumerate() {
        let ratios = |(tiles, counts): (u64, [u64; 4])| -> String {
            (0..4)
                .map(|k| {
                    format!(
                        "{:5.2}",
                        counts[k] as f64 / tiles as f64 / (-f64::from(zs[k])).exp()
                    )
                })
                .collect::<Vec<_>>()
                .join(" ")
        };
        println!(
            "  Q {:5.1}: all rows {} | rows below 64 Hz {}   ({} tiles)",
            plane.q,
            ratios(tally[p][0]),
            ratios(tally[p][1]),
            tally[p][0].0
        );
    }
}
