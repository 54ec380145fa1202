//! Extended glitches at their true loudness (issue 18): arches, upward
//! sweeps (chirps) and long tones injected into white Gaussian noise at
//! matched-filter SNR 8, 10, 12 and 20, scanned with the default
//! parameters, which cluster connected tiles (`src/clusters.rs`).
//!
//! The true SNR is the matched-filter SNR of the injected waveform in the
//! noise PSD, `ρ² = 4 Σ |h̃|² Δf / S` (e.g. Allen et al. 2012, Phys. Rev. D
//! 85, 122006, Eq. 2.4; `waveforms::matched_filter_snr`); white noise of
//! unit variance at rate fs has the one-sided PSD `2/fs`. Our generator
//! (`waveforms::Waveform`), in the shapes and ranges of the issue: arches
//! 20 → 40–60 → 20 Hz over 0.5–2 s, sweeps 35 → 150–300 Hz over 0.2–1 s,
//! tones at 410 Hz for 0.1–0.5 s (Q ≈ 130–640, above the searched 64).
//!
//! The noise rate check (`extended_noise_rate_*`, ignored: `.ci/run` runs
//! it) scans 20 h of white noise with and without clusters.

use glitchbook::scan::{scan_source, InMemory, ScanParams};
use glitchbook::trigger::Trigger;
use glitchbook::waveforms::Waveform;
use rand::{Rng, SeedableRng};
use rand_distr::{Distribution, StandardNormal};
use rand_xoshiro::Xoshiro256Plus;

const FS: f64 = 4096.0;
/// Seconds between injections (the longest arch lasts 2 s).
const SPACING_S: f64 = 6.0;

fn waveform(kind: &str, rng: &mut impl Rng) -> Waveform {
    let phase_rad = rng.gen_range(0.0..std::f64::consts::TAU);
    match kind {
        "arch" => Waveform::Arch {
            f_top_hz: rng.gen_range(40.0..60.0),
            f_edge_hz: 20.0,
            duration_s: rng.gen_range(0.5..2.0),
            edge_frac: 0.2,
            phase_rad,
        },
        "sweep" => Waveform::Sweep {
            f_start_hz: 35.0,
            f_end_hz: rng.gen_range(150.0..300.0),
            duration_s: rng.gen_range(0.2..1.0),
            edge_frac: 0.2,
            phase_rad,
        },
        _ => Waveform::Tone {
            f0_hz: 410.0,
            duration_s: rng.gen_range(0.1..0.5),
            edge_frac: 0.2,
            phase_rad,
        },
    }
}

/// For each injection of `kind` at SNR `rho` (`n` of them), the trigger
/// found over it: (found, equivalent SNR / ρ).
fn recover(kind: &str, rho: f64, n: usize, seed: u64) -> Vec<(bool, f64)> {
    let mut rng = Xoshiro256Plus::seed_from_u64(seed);
    let secs = 40.0 + SPACING_S * n as f64;
    let mut data: Vec<f64> = (0..(secs * FS) as usize)
        .map(|_| StandardNormal.sample(&mut rng))
        .collect();
    let psd = |_f: f64| 2.0 / FS;
    let mut windows = Vec::new();
    for i in 0..n {
        let w = waveform(kind, &mut rng);
        let tc = 20.0 + SPACING_S * i as f64 + rng.gen_range(0.0..0.05);
        let amp = w.amplitude_for_snr(rho, FS, &psd);
        w.add_to(&mut data, 0.0, FS, tc, amp);
        let (a, b, _, _) = w.extent();
        windows.push((tc + a - 0.1, tc + b + 0.1));
    }
    let src = InMemory {
        data,
        rate_hz: FS,
        start_gps: 0.0,
    };
    let params = ScanParams {
        fmax: Some(1024.0),
        ..ScanParams::default()
    };
    let (_, _, trig, _) = scan_source(&src, &params, (None, None), None, &|_| {}).unwrap();
    windows
        .iter()
        .map(|&(lo, hi)| {
            let best = trig
                .iter()
                .filter(|t| t.t_peak >= lo && t.t_peak <= hi)
                .map(|t| t.snr_eq)
                .fold(f64::NAN, f64::max);
            (best.is_finite(), best / rho)
        })
        .collect()
}

fn median(mut v: Vec<f64>) -> f64 {
    v.sort_by(f64::total_cmp);
    v[v.len() / 2]
}

/// Recall at SNR ≥ 10 (pooled over 10, 12 and 20) ≥ 0.9 and median
/// equivalent/true SNR ≥ 0.8 at each SNR ≥ 10 (the figures),
/// printed per SNR with `--nocapture`.
fn check(kind: &str, seed: u64) {
    let n = 24;
    let (mut found, mut total) = (0, 0);
    for (k, rho) in [8.0, 10.0, 12.0, 20.0].into_iter().enumerate() {
        let r = recover(kind, rho, n, seed + k as u64);
        let hits = r.iter().filter(|x| x.0).count();
        let ratio = median(r.iter().filter(|x| x.0).map(|x| x.1).collect());
        println!(
            "{kind} SNR {rho}: recall {:.2}, median equivalent/true SNR {ratio:.2}",
            hits as f64 / n as f64
        );
        if rho >= 10.0 {
            found += hits;
            total += n;
            assert!(ratio >= 0.8, "{kind} at SNR {rho}: median ratio {ratio:.2}");
        }
    }
    let recall = found as f64 / total as f64;
    assert!(recall >= 0.9, "{kind}: recall at SNR ≥ 10 {recall:.2}");
}

#[test]
fn arches_are_found_at_their_loudness() {
    check("arch", 100);
}

#[test]
fn sweeps_are_found_at_their_loudness() {
    check("sweep", 200);
}

#[test]
fn long_tones_are_found_at_their_loudness() {
    check("tone", 300);
}

/// Triggers per hour in `hours` of white noise, with and without clusters.
fn noise_rates(hours: f64) -> (f64, f64) {
    let mut rng = Xoshiro256Plus::seed_from_u64(18);
    let data: Vec<f64> = (0..(hours * 3600.0 * FS) as usize)
        .map(|_| StandardNormal.sample(&mut rng))
        .collect();
    let src = InMemory {
        data,
        rate_hz: FS,
        start_gps: 0.0,
    };
    let rate = |clusters: bool| {
        let params = ScanParams {
            fmax: Some(1024.0),
            clusters,
            ..ScanParams::default()
        };
        let (_, analysed, trig, _): (_, _, Vec<Trigger>, _) =
            scan_source(&src, &params, (None, None), None, &|_| {}).unwrap();
        trig.len() as f64 / (analysed.total() / 3600.0)
    };
    (rate(false), rate(true))
}

/// The noise trigger rate with clusters at most 1.5× the single-tile rate
/// (issue 18), over 20 h of white Gaussian noise.
#[test]
#[ignore = "long (20 h of noise); .ci/run runs it"]
fn extended_noise_rate_stays_within_half_again_the_single_tile_rate() {
    let (tiles, with) = noise_rates(20.0);
    println!("noise triggers per hour: single tiles {tiles:.2}, with clusters {with:.2}");
    assert!(tiles > 0.0);
    assert!(with <= 1.5 * tiles, "{with:.2}/h against {tiles:.2}/h");
}

/// The clustered statistic's null moments (`clusters::null_variance`):
/// `S = Σ w Z` over fixed regions of a plane (3 rows × 0.5 s, not chosen
/// by their energies) in white Gaussian noise has mean `Σ w` and variance
/// `Σ_ij w_i w_j c_ij` with the Gaussian-window overlap `c_ij` — checked by
/// simulation (the overlap of neighbouring tiles is what makes the sum's
/// degrees of freedom fewer than its tiles), in the lowest and highest Q
/// planes of the standard plan, within 20%.
#[test]
fn cluster_sums_in_noise_have_the_modelled_mean_and_variance() {
    use glitchbook::clusters::null_variance;
    use glitchbook::scan::Conditioner;
    use glitchbook::tails::{STANDARD_HIGHPASS, STANDARD_TILING};
    use glitchbook::tf::QPlan;
    let (block_s, pad_s) = (32.0, 2.0);
    let n = (block_s * FS) as usize;
    let plan = QPlan::new(
        FS,
        n,
        &STANDARD_TILING,
        STANDARD_HIGHPASS,
        &mut rustfft::FftPlanner::new(),
    )
    .unwrap();
    let cond = Conditioner::new(n, FS, (pad_s * FS) as usize, FS as usize, STANDARD_HIGHPASS)
        .unwrap()
        .with_top(plan.top_hz());
    let (mut cb, mut ws) = (cond.buffers(), plan.workspace());
    let keep = (pad_s, block_s - pad_s);
    let planes = [0, plan.planes.len() - 1];
    // Per plane: sums S of every region, and the model's mean and variance.
    let mut sums: Vec<Vec<f64>> = vec![Vec::new(); 2];
    let mut model = [(0.0, 0.0); 2];
    let mut rng = Xoshiro256Plus::seed_from_u64(1818);
    for _ in 0..60 {
        let src = InMemory {
            data: (0..n).map(|_| StandardNormal.sample(&mut rng)).collect(),
            rate_hz: FS,
            start_gps: 0.0,
        };
        cond.whiten_block_with(&src, 0, &mut cb).unwrap();
        for (k, &p) in planes.iter().enumerate() {
            let plane = &plan.planes[p];
            let r0 = plane.rows.iter().position(|r| r.f_hz >= 100.0).unwrap();
            let rows: Vec<(Vec<f32>, f64, f64, f64)> = (r0..r0 + 3)
                .map(|r| {
                    let (e, dt) = plan.row_energies(p, r, &cb.whitened, 0.0, keep, &mut ws);
                    let f = plane.rows[r].f_hz;
                    let df = 0.5 * (plane.rows[r + 1].f_hz - plane.rows[r - 1].f_hz);
                    (e, dt, f, df)
                })
                .collect();
            for a in (4..27).step_by(2) {
                let (t_a, t_b) = (a as f64, a as f64 + 0.5);
                let mut pts = Vec::new();
                for (e, dt, f, df) in &rows {
                    for (i, z) in e.iter().enumerate() {
                        let t = i as f64 * dt;
                        if t >= t_a && t < t_b {
                            pts.push((t, *f, dt * df, f64::from(*z)));
                        }
                    }
                }
                pts.sort_by(|x, y| x.0.total_cmp(&y.0));
                sums[k].push(pts.iter().map(|p| p.2 * p.3).sum());
                model[k] = (pts.iter().map(|p| p.2).sum(), null_variance(plane.q, &pts));
            }
        }
    }
    for (k, s) in sums.iter().enumerate() {
        let m = s.iter().sum::<f64>() / s.len() as f64;
        let v = s.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (s.len() - 1) as f64;
        let (mm, vm) = model[k];
        println!(
            "plane {k}: mean {m:.3} (model {mm:.3}), variance {v:.4} (model {vm:.4}), dof {:.1}",
            mm * mm / vm
        );
        assert!(
            (m / mm - 1.0).abs() < 0.05,
            "plane {k}: mean {m} against {mm}"
        );
        assert!(
            (v / vm - 1.0).abs() < 0.2,
            "plane {k}: variance {v} against {vm}"
        );
    }
}
