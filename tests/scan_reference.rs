//! The scan pipeline (conditioning, Q tiling, trigger clustering) against
//! outside references: SciPy's Welch estimate, the exponential distribution
//! of normalised tile energy in Gaussian noise, the textbook white-noise PSD
//! and analytic matched-filter SNRs of sine-Gaussians.

use glitchbook::condition::{welch_median, Psd};
use glitchbook::scan::{read_and_whiten, resolve_params, scan_source, InMemory, ScanParams};
use glitchbook::tf::{mismatch_step, QPlan, Tiling};
use rand::SeedableRng;
use rand_distr::{Distribution, StandardNormal};
use rand_xoshiro::Xoshiro256Plus;
use realfft::RealFftPlanner;
use rustfft::FftPlanner;

fn white(n: usize, sigma: f64, seed: u64) -> Vec<f64> {
    let mut rng = Xoshiro256Plus::seed_from_u64(seed);
    (0..n)
        .map(|_| {
            let z: f64 = StandardNormal.sample(&mut rng);
            sigma * z
        })
        .collect()
}

/// Colour `x` by multiplying its spectrum by `t(f)`.
fn colour(x: &[f64], fs: f64, t: impl Fn(f64) -> f64) -> Vec<f64> {
    let n = x.len();
    let mut p = RealFftPlanner::<f64>::new();
    let (fwd, inv) = (p.plan_fft_forward(n), p.plan_fft_inverse(n));
    let mut buf = x.to_vec();
    let mut spec = fwd.make_output_vec();
    fwd.process(&mut buf, &mut spec).unwrap();
    for (k, c) in spec.iter_mut().enumerate() {
        *c *= t(k as f64 * fs / n as f64) / n as f64;
    }
    spec[0].im = 0.0;
    spec[n / 2].im = 0.0;
    inv.process(&mut spec, &mut buf).unwrap();
    buf
}

/// Matched-filter SNR of `h` in noise coloured by `t` from white noise of
/// variance σ²: ρ² = (1/N) Σ_k |H_k / T(f_k)|² / σ² over all N bins
/// (Parseval after whitening; textbook).
fn matched_snr(h: &[f64], fs: f64, sigma: f64, t: impl Fn(f64) -> f64) -> f64 {
    let n = h.len();
    let fwd = RealFftPlanner::<f64>::new().plan_fft_forward(n);
    let mut buf = h.to_vec();
    let mut spec = fwd.make_output_vec();
    fwd.process(&mut buf, &mut spec).unwrap();
    let mut sum = 0.0;
    for (k, c) in spec.iter().enumerate() {
        let mult = if k == 0 || (n.is_multiple_of(2) && k == n / 2) {
            1.0
        } else {
            2.0
        };
        sum += mult * c.norm_sqr() / t(k as f64 * fs / n as f64).powi(2);
    }
    (sum / n as f64).sqrt() / sigma
}

fn sine_gaussian(n: usize, fs: f64, t0: f64, f0: f64, q: f64, amp: f64) -> Vec<f64> {
    let tau = q / (2.0 * std::f64::consts::PI * f0);
    (0..n)
        .map(|i| {
            let dt = i as f64 / fs - t0;
            amp * (-(dt / tau).powi(2)).exp() * (2.0 * std::f64::consts::PI * f0 * dt).sin()
        })
        .collect()
}

#[derive(serde::Deserialize)]
struct WelchCase {
    name: String,
    fs: f64,
    nperseg: usize,
    noverlap: usize,
    x: Vec<f64>,
    f: Vec<f64>,
    pxx: Vec<f64>,
}

#[derive(serde::Deserialize)]
struct WelchFixture {
    cases: Vec<WelchCase>,
}

/// Reference: scipy.signal.welch(x, fs, window='hann', nperseg, noverlap,
/// average='median') from SciPy 1.17.1 (tests/data/scan/make_fixtures_scan.py).
#[test]
fn welch_median_matches_scipy() {
    let text = std::fs::read_to_string("tests/data/scan/welch_median.json").unwrap();
    let fx: WelchFixture = serde_json::from_str(&text).unwrap();
    assert_eq!(fx.cases.len(), 2);
    for c in fx.cases {
        let psd: Psd = welch_median(&c.x, c.fs, c.nperseg, c.noverlap).unwrap();
        assert_eq!(psd.density.len(), c.pxx.len(), "{}", c.name);
        for (k, (&mine, &theirs)) in psd.density.iter().zip(&c.pxx).enumerate() {
            assert!((psd.freqs_hz()[k] - c.f[k]).abs() < 1e-12);
            let rel = (mine - theirs).abs() / theirs.abs().max(f64::MIN_POSITIVE);
            assert!(
                rel < 1e-9,
                "{} bin {k}: {mine} vs {theirs} (rel {rel})",
                c.name
            );
        }
    }
}

/// White Gaussian noise of variance σ² has one-sided PSD 2σ²/fs (textbook).
/// The mean over bins of the median-Welch estimate must agree within a few
/// standard errors.
#[test]
fn white_noise_psd_is_two_sigma_squared_over_fs() {
    let (fs, sigma) = (2048.0, 3.0e-21);
    let x = white(2048 * 64, sigma, 1);
    let psd = welch_median(&x, fs, 2048, 1024).unwrap();
    let expected = 2.0 * sigma * sigma / fs;
    let inner = &psd.density[10..psd.density.len() - 10];
    let mean = inner.iter().sum::<f64>() / inner.len() as f64;
    // 127 segments per bin, ~1000 bins: the mean is good to well under 1%.
    assert!(
        (mean / expected - 1.0).abs() < 0.02,
        "mean PSD {mean:e} vs {expected:e}"
    );
}

/// Normalised tile energy of Gaussian noise is exponential with mean one,
/// P(Z > z) = exp(−z) (Chatterji et al. 2004). Checked on the full
/// conditioning chain (estimated PSD, whitening, high-pass) over 20 minutes
/// of white noise, pooling every tile of every row in the blocks' kept parts.
/// For each z = 2..10 the tail exponent −ln P(Z > z) / z is within 5% of 1;
/// for z ≤ 7, where the count is large, the fraction itself is within 5%.
#[test]
fn tile_energy_tail_is_exponential() {
    let fs = 1024.0;
    let secs = 1200;
    let src = InMemory {
        data: white(1024 * secs, 1.0, 2),
        rate_hz: fs,
        start_gps: 0.0,
    };
    let params = ScanParams {
        fmax: Some(256.0),
        ..ScanParams::default()
    };
    let rp = resolve_params(&params, fs, None, None).unwrap();
    let n = (rp.block_s * fs) as usize;
    let pad = (rp.pad_s * fs) as usize;
    let welch_n = (rp.welch_s * fs) as usize;
    let tiling = Tiling {
        fmin: rp.fmin,
        fmax: rp.fmax,
        qmin: rp.qmin,
        qmax: rp.qmax,
        mismatch: rp.mismatch,
    };
    let hp = (0.5 * rp.fmin, 0.9 * rp.fmin);
    let plan = QPlan::new(fs, n, &tiling, hp, &mut FftPlanner::new()).unwrap();
    let mut ws = plan.workspace();
    let mut counts = [0u64; 11];
    let mut total = 0u64;
    let mut i0 = 0;
    while i0 + n <= src.data.len() {
        let w = read_and_whiten(&src, i0, n, pad, welch_n, hp).unwrap();
        for (p, plane) in plan.planes.iter().enumerate() {
            for r in 0..plane.rows.len() {
                let t0 = i0 as f64 / fs;
                let keep = (t0 + pad as f64 / fs, t0 + (n - pad) as f64 / fs);
                let (z, dt) = plan.row_energies(p, r, &w, t0, keep, &mut ws);
                let lo = (pad as f64 / fs / dt).ceil() as usize;
                let hi = ((n - pad) as f64 / fs / dt).ceil() as usize;
                for &e in &z[lo..hi] {
                    total += 1;
                    for (zz, c) in counts.iter_mut().enumerate().skip(2) {
                        if e as f64 > zz as f64 {
                            *c += 1;
                        }
                    }
                }
            }
        }
        i0 += n - 2 * pad;
    }
    eprintln!("tile energy tail over {total} tiles (z, observed, exp(-z)):");
    for (z, &count) in counts.iter().enumerate().skip(2) {
        let p = count as f64 / total as f64;
        let expected = (-(z as f64)).exp();
        eprintln!(
            "  {z:2}  {p:.3e}  {expected:.3e}  ratio {:.3}",
            p / expected
        );
        let exponent = -p.ln() / z as f64;
        assert!(
            (exponent - 1.0).abs() < 0.05,
            "z = {z}: exponent {exponent}"
        );
        if z <= 7 {
            assert!(
                (p / expected - 1.0).abs() < 0.05,
                "z = {z}: {p} vs {expected}"
            );
        }
    }
}

/// The trigger rate at the default threshold (SNR 5.5) in pure Gaussian
/// noise, reported; and no trigger sits at a block edge more than anywhere else.
#[test]
fn gaussian_noise_trigger_rate_is_low() {
    let fs = 2048.0;
    let secs = 1024.0;
    let src = InMemory {
        data: white((fs * secs) as usize, 1.0, 3),
        rate_hz: fs,
        start_gps: 1e9,
    };
    let (rp, analysed, trig, _) =
        scan_source(&src, &ScanParams::default(), (None, None), None, &|_| {}).unwrap();
    let rate_per_hour = trig.len() as f64 / analysed.total() * 3600.0;
    eprintln!(
        "Gaussian noise at SNR ≥ {}: {} triggers in {:.0} s analysed ({rate_per_hour:.1} per hour)",
        rp.snr_threshold,
        trig.len(),
        analysed.total()
    );
    // P(Z > 16.1) = 1e-7 per tile; with ~30,000 tiles/s here the bound is
    // ~11/hour before tile correlations reduce it: a generous cap of 60/hour.
    assert!(rate_per_hour < 60.0, "{rate_per_hour}");
    assert!(trig.iter().all(|t| t.snr >= rp.snr_threshold));
}

struct Injection {
    t0: f64,
    f0: f64,
    q: f64,
}

fn check_recovery(coloured: bool) {
    let fs = 4096.0;
    let secs = 160.0;
    let n = (fs * secs) as usize;
    let transfer = move |f: f64| -> f64 {
        if coloured {
            (1.0 + (40.0 / (f + 1.0)).powi(4) + (f / 400.0).powi(2)).sqrt()
        } else {
            1.0
        }
    };
    let sigma = 1e-21;
    let mut data = colour(&white(n, sigma, 4 + coloured as u64), fs, transfer);
    let injections = [
        Injection {
            t0: 20.3,
            f0: 60.0,
            q: 6.0,
        },
        Injection {
            t0: 45.7,
            f0: 150.0,
            q: 20.0,
        },
        Injection {
            t0: 70.1,
            f0: 400.0,
            q: 10.0,
        },
        Injection {
            t0: 95.9,
            f0: 900.0,
            q: 40.0,
        },
        Injection {
            t0: 120.4,
            f0: 250.0,
            q: 4.5,
        },
    ];
    let target_snr = 25.0;
    for inj in &injections {
        let unit = sine_gaussian(n, fs, inj.t0, inj.f0, inj.q, 1.0);
        let rho1 = matched_snr(&unit, fs, sigma, transfer);
        for (d, h) in data.iter_mut().zip(&unit) {
            *d += h * target_snr / rho1;
        }
    }
    let src = InMemory {
        data,
        rate_hz: fs,
        start_gps: 0.0,
    };
    let (rp, _, trig, _) =
        scan_source(&src, &ScanParams::default(), (None, None), None, &|_| {}).unwrap();
    let step = mismatch_step(rp.mismatch);
    for inj in &injections {
        let best = trig
            .iter()
            .filter(|t| (t.t_peak - inj.t0).abs() < 0.5)
            .max_by(|a, b| a.snr.total_cmp(&b.snr))
            .unwrap_or_else(|| panic!("no trigger near {}", inj.t0));
        eprintln!(
            "coloured={coloured} f0={} Q={}: snr {:.2} (analytic {target_snr}), f_peak {:.1}, Q {:.1}, dt {:+.4} s",
            inj.f0,
            inj.q,
            best.snr,
            best.f_peak,
            best.q,
            best.t_peak - inj.t0
        );
        assert!(
            (best.snr / target_snr - 1.0).abs() < 0.15,
            "SNR {} vs {target_snr}",
            best.snr
        );
        // Q is estimated between planes a factor 2 apart (sech fit of the
        // planes' peak energies): within 30% of the injected Q.
        assert!(
            (best.q / inj.q).ln().abs() < 1.3f64.ln(),
            "Q {} vs injected {}",
            best.q,
            inj.q
        );
        // One row: adjacent rows at the recovered Q differ by the factor
        // exp(2 s / sqrt(2 + Q²)) (the row spacing of the tiling).
        let row_ratio = (2.0 * step / (2.0 + best.q * best.q).sqrt()).exp();
        assert!(
            (best.f_peak / inj.f0).ln().abs() <= row_ratio.ln() * 1.0001 + 1e-9,
            "f_peak {}",
            best.f_peak
        );
        // One tile: the time step of the recovered row, s Q / (2π f).
        let dtau = step * best.q / (2.0 * std::f64::consts::PI * best.f_peak);
        assert!(
            (best.t_peak - inj.t0).abs() <= dtau,
            "t_peak off by {}",
            best.t_peak - inj.t0
        );
    }
}

/// Sine-Gaussians of known matched-filter SNR in white noise are recovered
/// with SNR within 15% (the mismatch of 0.2 bounds the energy loss), f_peak
/// within one row, t_peak within one tile and Q within 30%.
#[test]
fn sine_gaussians_recovered_in_white_noise() {
    check_recovery(false);
}

/// The same in coloured noise with a steep low-frequency wall.
#[test]
fn sine_gaussians_recovered_in_coloured_noise() {
    check_recovery(true);
}

/// A transient exactly on the seam between two blocks' kept regions is found
/// once, with the right SNR: block edges neither lose nor duplicate it.
#[test]
fn transient_on_block_seam_found_once() {
    let fs = 1024.0;
    let params = ScanParams {
        fmax: Some(256.0),
        block_s: Some(32.0),
        ..ScanParams::default()
    };
    let rp = resolve_params(&params, fs, None, None).unwrap();
    // First seam: the end of the first block's kept part.
    let seam = rp.block_s - rp.pad_s;
    let n = (fs * 200.0) as usize;
    let mut data = white(n, 1.0, 9);
    let unit = sine_gaussian(n, fs, seam, 100.0, 8.0, 1.0);
    let rho1 = matched_snr(&unit, fs, 1.0, |_| 1.0);
    for (d, h) in data.iter_mut().zip(&unit) {
        *d += h * 20.0 / rho1;
    }
    let src = InMemory {
        data,
        rate_hz: fs,
        start_gps: 0.0,
    };
    let (_, analysed, trig, _) = scan_source(&src, &params, (None, None), None, &|_| {}).unwrap();
    assert!(analysed.contains(seam));
    let near: Vec<_> = trig
        .iter()
        .filter(|t| (t.t_peak - seam).abs() < 1.0)
        .collect();
    assert_eq!(near.len(), 1, "{near:?}");
    assert!((near[0].snr / 20.0 - 1.0).abs() < 0.15, "{}", near[0].snr);
}

/// Strain-scale data (1e-21) with absurd and infinite samples: infinities
/// are dropouts, absurd finite values make a loud trigger but no crash, and
/// nothing non-finite reaches the output.
#[test]
fn absurd_values_do_not_break_whitening() {
    let fs = 1024.0;
    let mut data = white(1024 * 120, 1e-21, 11);
    data[40_000] = 1e30;
    data[80_000] = f64::INFINITY;
    let src = InMemory {
        data,
        rate_hz: fs,
        start_gps: 0.0,
    };
    let params = ScanParams {
        fmax: Some(256.0),
        ..ScanParams::default()
    };
    let (_, analysed, trig, _) = scan_source(&src, &params, (None, None), None, &|_| {}).unwrap();
    assert!(
        !analysed.contains(80_000.0 / fs),
        "an infinite sample is a dropout"
    );
    assert!(trig
        .iter()
        .all(|t| t.snr.is_finite() && t.energy.is_finite()));
    assert!(trig.iter().any(|t| (t.t_peak - 40_000.0 / fs).abs() < 0.5));
}
