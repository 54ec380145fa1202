//! The demo scenario generator (`glitchbook::demo`): noise model, SNR
//! normalisation, reproducibility and the files later stages are checked against.

use glitchbook::condition::welch_median;
use glitchbook::demo::*;
use rand::SeedableRng;
use rand_xoshiro::Xoshiro256Plus;
use realfft::RealFftPlanner;
use std::path::{Path, PathBuf};
use std::sync::OnceLock;

const HOURS: f64 = 0.2;

/// Minimal `.npy` reader for the test (1-D, `<f4`/`<f8`, format 1.0), kept
/// independent of the library's reader.
fn read_npy(path: &Path) -> Vec<f64> {
    let bytes = std::fs::read(path).unwrap();
    assert_eq!(&bytes[..8], b"\x93NUMPY\x01\x00", "{}", path.display());
    let hlen = u16::from_le_bytes([bytes[8], bytes[9]]) as usize;
    let header = std::str::from_utf8(&bytes[10..10 + hlen]).unwrap();
    let body = &bytes[10 + hlen..];
    if header.contains("'<f4'") {
        body.chunks_exact(4)
            .map(|c| f32::from_le_bytes(c.try_into().unwrap()) as f64)
            .collect()
    } else {
        assert!(header.contains("'<f8'"), "{header}");
        body.chunks_exact(8)
            .map(|c| f64::from_le_bytes(c.try_into().unwrap()))
            .collect()
    }
}

fn scenario_dir(name: &str) -> PathBuf {
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR")).join(name);
    let _ = std::fs::remove_dir_all(&dir);
    dir
}

/// The scenario with seed 7, written once and shared by the tests below.
fn shared() -> &'static ScenarioSummary {
    static S: OnceLock<ScenarioSummary> = OnceLock::new();
    S.get_or_init(|| {
        let opts = DemoOptions {
            seed: 7,
            hours: HOURS,
        };
        write_scenario(&scenario_dir("demo_seed7"), &opts).unwrap()
    })
}

fn reference() -> serde_json::Value {
    let text = std::fs::read_to_string(
        Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data/demo_reference.json"),
    )
    .unwrap();
    serde_json::from_str(&text).unwrap()
}

fn target_file(s: &ScenarioSummary) -> PathBuf {
    s.channels
        .iter()
        .find(|c| c.role == "target")
        .unwrap()
        .file
        .clone()
}

#[test]
fn same_seed_same_bytes_other_seed_differs() {
    let a = shared();
    let b_dir = scenario_dir("demo_seed7_again");
    let b = write_scenario(
        &b_dir,
        &DemoOptions {
            seed: 7,
            hours: HOURS,
        },
    )
    .unwrap();
    let c = write_scenario(
        &scenario_dir("demo_seed8"),
        &DemoOptions {
            seed: 8,
            hours: HOURS,
        },
    )
    .unwrap();
    let mut names: Vec<_> = std::fs::read_dir(&a.dir)
        .unwrap()
        .map(|e| e.unwrap().file_name())
        .collect();
    names.sort();
    assert_eq!(names.len(), 8 + 5, "8 .npy files + 5 text files: {names:?}");
    for name in &names {
        let fa = std::fs::read(a.dir.join(name)).unwrap();
        let fb = std::fs::read(b.dir.join(name)).unwrap();
        assert!(fa == fb, "{name:?} differs between two runs with seed 7");
    }
    for name in [
        "truth.csv",
        "injections.csv",
        "AV1-STRAIN.npy",
        "AV1-ACC_HVAC.npy",
    ] {
        let fa = std::fs::read(a.dir.join(name)).unwrap();
        let fc = std::fs::read(c.dir.join(name)).unwrap();
        assert!(fa != fc, "{name} is the same for seeds 7 and 8");
    }
}

#[test]
fn sine_gaussian_energy_matches_scipy_quad() {
    // Reference: scipy.integrate.quad of h(t)^2 (SciPy 1.17.1), tests/data/README.md.
    for r in reference()["sine_gaussian_energy"].as_array().unwrap() {
        let (a, f0, q, phi) = (
            r["a"].as_f64().unwrap(),
            r["f0_hz"].as_f64().unwrap(),
            r["q"].as_f64().unwrap(),
            r["phase_rad"].as_f64().unwrap(),
        );
        let want = r["int_h2_dt"].as_f64().unwrap();
        // Our waveform, summed on a fine grid (Δt = 1/(200 f0)).
        let fs = 200.0 * f0;
        let hw = sine_gaussian_half_width_s(f0, q);
        let m = (hw * fs).ceil() as i64;
        let sum: f64 = (-m..=m)
            .map(|i| (a * sine_gaussian(i as f64 / fs, f0, q, phi)).powi(2))
            .sum::<f64>()
            / fs;
        assert!(
            (sum / want - 1.0).abs() < 1e-6,
            "sum {sum} vs quad {want} (f0 {f0}, Q {q})"
        );
        // The analytic formula drops a term ~exp(-Q²/2) relative: exact for Q ≥ 10,
        // within 2% at Q = 3.
        let analytic = sine_gaussian_energy(a, f0, q);
        let tol = if q >= 10.0 { 1e-9 } else { 0.02 };
        assert!(
            (analytic / want - 1.0).abs() < tol,
            "analytic {analytic} vs quad {want} (Q {q})"
        );
    }
}

#[test]
fn ar1_psd_matches_scipy_freqz() {
    // Reference: 2|H(f)|²/fs from scipy.signal.freqz([√(1-a²)], [1, -a]) (SciPy 1.17.1).
    for r in reference()["ar1_psd"].as_array().unwrap() {
        let a = r["a"].as_f64().unwrap();
        let fs = r["fs_hz"].as_f64().unwrap();
        for (f, p) in r["f_hz"]
            .as_array()
            .unwrap()
            .iter()
            .zip(r["psd"].as_array().unwrap())
        {
            let (f, p) = (f.as_f64().unwrap(), p.as_f64().unwrap());
            let ours = ar1_psd(f, fs, a);
            assert!((ours / p - 1.0).abs() < 1e-10, "a {a} f {f}: {ours} vs {p}");
        }
    }
}

#[test]
fn matched_filter_snr_matches_numpy() {
    // Reference: the same sum computed with numpy.fft.rfft (NumPy 2.4.6) for
    // unit-variance white noise (S = 2/fs).
    for r in reference()["matched_filter_white"].as_array().unwrap() {
        let (fs, f0, q, phi) = (
            r["fs_hz"].as_f64().unwrap(),
            r["f0_hz"].as_f64().unwrap(),
            r["q"].as_f64().unwrap(),
            r["phase_rad"].as_f64().unwrap(),
        );
        let m = (sine_gaussian_half_width_s(f0, q) * fs).ceil() as i64;
        let h: Vec<f64> = (-m..=m)
            .map(|i| sine_gaussian(i as f64 / fs, f0, q, phi))
            .collect();
        let rho = matched_filter_snr(&h, fs, &|_| 2.0 / fs);
        let want = r["snr_white_unit"].as_f64().unwrap();
        assert!((rho / want - 1.0).abs() < 1e-9, "{rho} vs {want}");
    }
}

#[test]
fn snr_normalisation_matches_narrow_band_formula() {
    // Narrow-band limit: ρ² = 4 ∫ |h̃|²/S df ≈ (4/S(f0)) ∫_0^∞ |h̃|² df, and by
    // Parseval ∫_{-∞}^{∞} h² dt = 2 ∫_0^∞ |h̃|² df, so ρ² ≈ (2/S(f0)) ∫ h² dt with
    // ∫ h² dt = A² Q √(π/2) / (4π f0) (see `sine_gaussian_energy`; checked
    // against scipy.integrate.quad above). Within 5% for Q ≥ 10, away from lines.
    let fs = TARGET_RATE_HZ;
    for &(f0, q) in &[
        (200.0, 10.0),
        (250.0, 20.0),
        (420.0, 30.0),
        (600.0, 50.0),
        (40.0, 20.0),
        (80.0, 12.0),
    ] {
        let snr = 20.0;
        let a = amplitude_for_snr(snr, fs, f0, q, 0.4, &target_psd);
        let analytic = (2.0 / target_psd(f0) * sine_gaussian_energy(a, f0, q)).sqrt();
        eprintln!("f0 {f0} Q {q}: A {a:e}, narrow-band rho {analytic}");
        assert!(
            (analytic / snr - 1.0).abs() < 0.05,
            "f0 {f0} Q {q}: numerical ρ {snr} vs narrow-band {analytic}"
        );
        // The amplitude is of the right order for strain (1e-22..1e-19).
        assert!(a > 1e-23 && a < 1e-19, "A = {a}");
    }
}

/// Inner product (a|b) = 4 Re Σ_k ã_k b̃_k* Δf / S(f_k) over 0 < f_k < fs/2.
fn inner(a: &[f64], b: &[f64], fs: f64, psd: &dyn Fn(f64) -> f64) -> f64 {
    let n = a.len();
    let fft = RealFftPlanner::<f64>::new().plan_fft_forward(n);
    let (mut xa, mut xb) = (a.to_vec(), b.to_vec());
    let (mut sa, mut sb) = (fft.make_output_vec(), fft.make_output_vec());
    fft.process(&mut xa, &mut sa).unwrap();
    fft.process(&mut xb, &mut sb).unwrap();
    let df = fs / n as f64;
    (1..n / 2)
        .map(|k| 4.0 * (sa[k] * sb[k].conj()).re / (fs * fs) * df / psd(k as f64 * df))
        .sum()
}

#[test]
fn injected_snr_is_recovered_in_model_noise() {
    // The noise scale and the SNR scale agree: for d = n + h with (h|h) = ρ²,
    // (d|h)/√(h|h) ~ N(ρ, 1) (standard matched-filter result). 24 noise
    // realisations of 32 s; mean within 4σ/√24 of ρ, spread near 1.
    let fs = TARGET_RATE_HZ;
    let n = 32 * fs as usize;
    let (f0, q, rho) = (230.0, 8.0, 15.0);
    let amp = amplitude_for_snr(rho, fs, f0, q, 1.0, &target_psd);
    let h: Vec<f64> = (0..n)
        .map(|i| amp * sine_gaussian((i as f64 - n as f64 / 2.0) / fs, f0, q, 1.0))
        .collect();
    let hh = inner(&h, &h, fs, &target_psd);
    assert!(
        (hh.sqrt() / rho - 1.0).abs() < 1e-3,
        "(h|h)^½ = {}",
        hh.sqrt()
    );
    let mut rng = Xoshiro256Plus::seed_from_u64(11);
    let stats: Vec<f64> = (0..24)
        .map(|_| {
            let noise = colored_gaussian_noise(&mut rng, n, fs, &target_psd).unwrap();
            let d: Vec<f64> = noise.iter().zip(&h).map(|(x, y)| x + y).collect();
            inner(&d, &h, fs, &target_psd) / hh.sqrt()
        })
        .collect();
    let mean = stats.iter().sum::<f64>() / stats.len() as f64;
    let sd = (stats.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / 23.0).sqrt();
    eprintln!("recovered SNR: mean {mean}, sd {sd}");
    assert!((mean - rho).abs() < 4.0 / 24f64.sqrt(), "mean {mean}");
    assert!(sd > 0.5 && sd < 1.6, "sd {sd}");
}

/// Mean of measured/model PSD over [f_lo, f_hi).
fn band_ratio(x: &[f64], f_lo: f64, f_hi: f64) -> (f64, usize, usize) {
    let nperseg = 4096;
    let psd = welch_median(x, TARGET_RATE_HZ, nperseg, nperseg / 2).unwrap();
    let nseg = (x.len() - nperseg) / (nperseg / 2) + 1;
    let bins: Vec<f64> = psd
        .freqs_hz()
        .iter()
        .zip(&psd.density)
        .filter(|(f, _)| **f >= f_lo && **f < f_hi)
        .map(|(f, p)| p / target_psd(*f))
        .collect();
    (
        bins.iter().sum::<f64>() / bins.len() as f64,
        bins.len(),
        nseg,
    )
}

#[test]
fn pure_noise_psd_matches_model() {
    // Welch median PSD (condition::welch_median, same estimate as
    // scipy.signal.welch(average='median')) of 200 s of model noise.
    // Statistical error of a median-of-n exponential estimate: 1/(ln2 √n) per
    // bin (asymptotic variance of the sample median, 1/(4 n p(m)²), p(m) = ½);
    // bins and 50%-overlapped segments are treated as independent and a
    // factor 1.5 covers the overlap correlation; the check is at 5σ.
    let mut rng = Xoshiro256Plus::seed_from_u64(3);
    let x = colored_gaussian_noise(&mut rng, 200 * 4096, TARGET_RATE_HZ, &target_psd).unwrap();
    for &(lo, hi) in &[(20.0, 40.0), (60.0, 95.0), (200.0, 480.0), (700.0, 1800.0)] {
        let (r, nbins, nseg) = band_ratio(&x, lo, hi);
        let sigma = 1.5 / (std::f64::consts::LN_2 * ((nseg * nbins) as f64).sqrt());
        eprintln!("pure noise band {lo}-{hi}: ratio {r}, sigma {sigma}");
        assert!(
            (r - 1.0).abs() < 5.0 * sigma + 0.005,
            "band {lo}-{hi} Hz: measured/model = {r} (σ {sigma})"
        );
    }
}

fn longest_finite_run(x: &[f64]) -> &[f64] {
    let (mut best, mut cur) = ((0, 0), 0);
    for (i, v) in x.iter().enumerate() {
        if !v.is_finite() {
            cur = i + 1;
        } else if i + 1 - cur > best.1 - best.0 {
            best = (cur, i + 1);
        }
    }
    &x[best.0..best.1]
}

#[test]
fn target_file_psd_and_amplitude() {
    let s = shared();
    let x = read_npy(&target_file(s));
    let run = longest_finite_run(&x);
    assert!(
        run.len() > 100 * 4096,
        "longest clean stretch {}",
        run.len()
    );
    // Time-domain amplitude of order 1e-21.
    let mean = run.iter().sum::<f64>() / run.len() as f64;
    let sd = (run.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / run.len() as f64).sqrt();
    eprintln!("strain std {sd:e}");
    assert!(sd > 1e-22 && sd < 1e-19, "strain std {sd}");
    // The model variance ∫S df (trapezoid, 0.01 Hz steps) predicts the std:
    // the sample std over ~10^5 correlated samples agrees within 15%
    // (dominated by the ~10 Hz wall, ~few thousand independent cycles).
    let var: f64 = (1..204_800)
        .map(|k| target_psd(k as f64 * 0.01) * 0.01)
        .sum();
    assert!(
        (sd / var.sqrt() - 1.0).abs() < 0.15,
        "std {sd} vs model {}",
        var.sqrt()
    );
    // Welch over the file (glitches included; the median average is robust to
    // them): within 5% of the model in line-free bands.
    for &(lo, hi) in &[(60.0, 95.0), (200.0, 480.0), (700.0, 1800.0)] {
        let (r, _, _) = band_ratio(run, lo, hi);
        eprintln!("file band {lo}-{hi}: ratio {r}");
        assert!((r - 1.0).abs() < 0.05, "band {lo}-{hi} Hz: {r}");
    }
    // The 503.2 Hz line stands far above the floor.
    let psd = welch_median(run, TARGET_RATE_HZ, 4096, 2048).unwrap();
    eprintln!(
        "line ratios 503: {}, 50: {}; model std {:e}",
        psd.at(503.0) / target_psd_smooth(503.0),
        psd.at(50.0) / target_psd_smooth(50.0),
        var.sqrt()
    );
    assert!(psd.at(503.0) / target_psd_smooth(503.0) > 50.0);
    assert!(psd.at(50.0) / target_psd_smooth(50.0) > 50.0);
}

#[test]
fn truth_families_late_family_and_spacing() {
    let s = shared();
    let truth = read_truth(&s.truth_csv).unwrap();
    let span = s.end_gps - s.start_gps;
    assert_eq!(span, HOURS * 3600.0);
    for fam in ["pebble", "drum", "kettle", "moth"] {
        let n = truth.iter().filter(|g| g.family == fam).count();
        assert!(n > 0, "family {fam} missing");
        let summ = s.families.iter().find(|f| f.name == fam).unwrap();
        assert_eq!(summ.n_injected, n);
    }
    assert!(
        (s.late_family_start_gps - (s.start_gps + 0.6 * span)).abs() < 1e-9,
        "late start"
    );
    for g in &truth {
        assert!(g.t_peak_gps > s.start_gps && g.t_peak_gps < s.end_gps);
        if g.family == "moth" {
            assert!(g.t_peak_gps >= s.start_gps + 0.6 * span, "early moth {g:?}");
        }
        let (f_lo, f_hi, q_lo, q_hi) = match g.family.as_str() {
            "pebble" => (100.0, 300.0, 3.0, 6.0),
            "drum" => (25.0, 50.0, 12.0, 25.0),
            "kettle" => (350.0, 650.0, 25.0, 50.0),
            "moth" => (60.0, 120.0, 6.0, 10.0),
            other => panic!("unknown family {other}"),
        };
        assert!(g.f0_hz >= f_lo && g.f0_hz <= f_hi && g.q >= q_lo && g.q <= q_hi);
        assert!(g.snr_target >= 6.0 && g.snr_target <= 300.0);
        match (g.family.as_str(), g.witness_channel.as_deref()) {
            ("pebble", w) => assert!(w.is_none()),
            (_, None) => assert!(g.witness_lag_s.is_none() && g.witness_snr.is_none()),
            ("drum", Some(w)) => {
                assert_eq!(w, "AV1:ACC_PUMP_ROOM");
                assert_eq!(g.witness_lag_s, Some(-0.015));
                assert!(g.witness_snr.unwrap() >= 10.0);
                assert_eq!(g.witness_f0_hz, Some(g.f0_hz));
            }
            ("kettle", Some(w)) => {
                assert_eq!(w, "AV1:MAG_CORNER_X");
                assert_eq!(g.witness_lag_s, Some(0.002));
            }
            ("moth", Some(w)) => {
                assert_eq!(w, "AV1:MAINS_MON");
                assert_eq!(g.witness_lag_s, Some(0.0));
                assert!((g.witness_f0_hz.unwrap() - 0.5 * g.f0_hz).abs() < 1e-12);
            }
            other => panic!("unexpected {other:?}"),
        }
    }
    for w in truth.windows(2) {
        assert!(w[1].t_peak_gps - w[0].t_peak_gps >= MIN_SPACING_S);
    }
    // injections.csv holds exactly the pebble times.
    let inj = std::fs::read_to_string(&s.injections_csv).unwrap();
    let mut lines = inj.lines();
    assert_eq!(lines.next(), Some("time"));
    let times: Vec<f64> = lines.map(|l| l.parse().unwrap()).collect();
    let pebbles: Vec<f64> = truth
        .iter()
        .filter(|g| g.family == "pebble")
        .map(|g| g.t_peak_gps)
        .collect();
    assert_eq!(times, pebbles);
}

#[test]
fn witness_fractions_follow_the_design() {
    // A longer run (1 h) with counts large enough to check the witnessed
    // fractions (90%, 80%, 85%) within binomial 4σ, and rates 40-60/h.
    let s = write_scenario(
        &scenario_dir("demo_seed21_long"),
        &DemoOptions {
            seed: 21,
            hours: 1.0,
        },
    )
    .unwrap();
    let truth = read_truth(&s.truth_csv).unwrap();
    std::fs::remove_dir_all(&s.dir).unwrap();
    // SNR law: 97% from p(ρ) ∝ ρ⁻³ on [6, 60], 3% on [60, 300], so
    // P(ρ > 12) = 0.97 (12⁻² − 60⁻²)/(6⁻² − 60⁻²) + 0.03 = 0.97·0.2424 + 0.03.
    let p12 = 0.97 * (12f64.powi(-2) - 60f64.powi(-2)) / (6f64.powi(-2) - 60f64.powi(-2)) + 0.03;
    let n = truth.len() as f64;
    let frac12 = truth.iter().filter(|g| g.snr_target > 12.0).count() as f64 / n;
    eprintln!("P(rho > 12): {frac12} of {n} (expected {p12})");
    assert!((frac12 - p12).abs() < 4.0 * (p12 * (1.0 - p12) / n).sqrt());
    assert!(truth.iter().all(|g| g.snr_target >= 6.0));
    for (fam, p) in [("drum", 0.9), ("kettle", 0.8), ("moth", 0.85)] {
        let f = s.families.iter().find(|f| f.name == fam).unwrap();
        let n = f.n_injected as f64;
        let frac = f.n_witnessed as f64 / n;
        eprintln!("{fam}: {} of {n} witnessed", f.n_witnessed);
        let sigma = (p * (1.0 - p) / n).sqrt();
        assert!((frac - p).abs() < 4.0 * sigma, "{fam}: {frac} of {n}");
    }
    for f in &s.families {
        let hours = if f.name == "moth" { 0.4 } else { 1.0 };
        let rate = f.n_injected as f64 / hours;
        assert!(rate > 25.0 && rate < 80.0, "{}: {rate}/h", f.name);
    }
}

#[test]
fn bundle_segments_and_dropouts() {
    let s = shared();
    let span = s.end_gps - s.start_gps;
    let text = std::fs::read_to_string(&s.bundle_toml).unwrap();
    let doc: toml::Table = text.parse().unwrap();
    let chans = doc["channel"].as_array().unwrap();
    assert_eq!(chans.len(), 8);
    let mut rates = Vec::new();
    for c in chans {
        let name = c["name"].as_str().unwrap();
        assert!(name.starts_with("AV1:"));
        let rate = c["rate"].as_float().unwrap();
        assert_eq!(c["start"].as_float().unwrap(), GPS_START);
        let role = c["role"].as_str().unwrap();
        assert_eq!(role == "target", name == "AV1:STRAIN");
        let data = read_npy(&s.dir.join(c["file"].as_str().unwrap()));
        assert_eq!(data.len() as f64, rate * span, "{name}");
        if name == "AV1:SEIS_FLOOR_Z" {
            assert_eq!(c["fmin"].as_float(), Some(1.0));
            assert_eq!(c["fmax"].as_float(), Some(16.0));
        }
        // NaN exactly inside the listed dropouts.
        let drops: Vec<_> = s.dropouts.iter().filter(|d| d.channel == name).collect();
        for (i, v) in data.iter().enumerate() {
            let t = GPS_START + i as f64 / rate;
            let inside = drops.iter().any(|d| t >= d.start_gps && t < d.end_gps);
            assert_eq!(v.is_nan(), inside, "{name} sample {i}");
        }
        if name == "AV1:STRAIN" || name == "AV1:MAG_CORNER_X" {
            assert!(!drops.is_empty(), "{name} has no dropout");
        }
        rates.push(rate as i64);
    }
    rates.sort();
    rates.dedup();
    assert!(rates.len() >= 6, "rates {rates:?}");
    // segments.txt: the span minus one gap that misses the dropouts.
    let seg_text = std::fs::read_to_string(&s.segments_txt).unwrap();
    let segs: Vec<(f64, f64)> = seg_text
        .lines()
        .filter(|l| !l.starts_with('#'))
        .map(|l| {
            let v: Vec<f64> = l.split_whitespace().map(|x| x.parse().unwrap()).collect();
            (v[0], v[1])
        })
        .collect();
    assert_eq!(segs.len(), 2);
    assert_eq!(segs[0].0, s.start_gps);
    assert_eq!(segs[1].1, s.end_gps);
    let gap = (segs[0].1, segs[1].0);
    assert_eq!(gap, s.segment_gap_gps);
    assert!((gap.1 - gap.0 - 360.0 * span / 7200.0).abs() < 1e-9);
    for d in &s.dropouts {
        assert!(
            d.end_gps <= gap.0 || d.start_gps >= gap.1,
            "{d:?} overlaps the gap"
        );
    }
}

#[test]
fn bad_input_is_reported() {
    let err = write_scenario(
        &scenario_dir("demo_bad"),
        &DemoOptions {
            seed: 1,
            hours: 0.0,
        },
    )
    .unwrap_err();
    assert!(format!("{err}").contains("hours"), "{err}");
    let dir = scenario_dir("demo_bad_truth");
    std::fs::create_dir_all(&dir).unwrap();
    let p = dir.join("truth.csv");
    std::fs::write(
        &p,
        "family,t_peak_gps,f0_hz,q,snr_target,witness_channel,witness_lag_s,witness_snr,witness_f0_hz\n\
         drum,1400000010.5,30,15,8,,,,\n\
         drum,oops,30,15,8,,,,\n",
    )
    .unwrap();
    let msg = format!("{}", read_truth(&p).unwrap_err());
    assert!(msg.contains("truth.csv:3"), "{msg}");
}

/// Phase-maximised matched-filter SNR of `data` (sampled at `fs`, first
/// sample at `start_gps`) for a sine-Gaussian (f0, Q) at `t0_gps`, using an
/// 8 s stretch with a 1 s Tukey taper each side. The waveform family at
/// fixed (t0, f0, Q) spans the two quadratures h_s = sg(φ=0), h_c = sg(φ=π/2),
/// so the maximum over amplitude and phase is ρ² = xᵀ G⁻¹ x with
/// x_i = (d|h_i), G_ij = (h_i|h_j); in Gaussian noise ρ² ~ noncentral χ²₂
/// with mean ρ_true² + 2 (standard result for a two-parameter linear family).
fn recovered_snr(
    data: &[f64],
    fs: f64,
    start_gps: f64,
    t0_gps: f64,
    f0: f64,
    q: f64,
    psd: &dyn Fn(f64) -> f64,
) -> Option<f64> {
    let n = (8.0 * fs) as usize;
    let i0 = ((t0_gps - start_gps) * fs).round() as i64 - n as i64 / 2;
    if i0 < 0 || i0 as usize + n > data.len() {
        return None;
    }
    let seg = &data[i0 as usize..i0 as usize + n];
    if seg.iter().any(|v| !v.is_finite()) {
        return None;
    }
    let win = glitchbook::condition::tukey(n, fs as usize);
    let d: Vec<f64> = seg.iter().zip(&win).map(|(x, w)| x * w).collect();
    let template = |phase: f64| -> Vec<f64> {
        (0..n)
            .map(|i| {
                let t = start_gps + (i0 + i as i64) as f64 / fs;
                sine_gaussian(t - t0_gps, f0, q, phase) * win[i]
            })
            .collect()
    };
    let (hs, hc) = (template(0.0), template(std::f64::consts::FRAC_PI_2));
    let (xs, xc) = (inner(&d, &hs, fs, psd), inner(&d, &hc, fs, psd));
    let (gss, gcc, gsc) = (
        inner(&hs, &hs, fs, psd),
        inner(&hc, &hc, fs, psd),
        inner(&hs, &hc, fs, psd),
    );
    let det = gss * gcc - gsc * gsc;
    Some(((gcc * xs * xs - 2.0 * gsc * xs * xc + gss * xc * xc) / det).sqrt())
}

#[test]
fn injected_glitches_are_found_at_their_truth_times() {
    // Every strain glitch of the seed-7 scenario (away from dropouts) is
    // recovered from the written file at its truth time, f0 and Q with the
    // truth SNR: |ρ_rec − √(ρ² + 2)| < 4 (≈ 4σ; σ ≈ 1 for the noise part).
    // Witnessed glitches are recovered the same way in the aux channel at
    // t0 + lag, with the aux channel's AR(1) PSD.
    let s = shared();
    let truth = read_truth(&s.truth_csv).unwrap();
    let strain = read_npy(&target_file(s));
    let aux_chan = |name: &str| s.channels.iter().find(|c| c.name == name).unwrap();
    // AR(1) coefficients of the aux witnesses (see README.txt of the scenario).
    let ar1 = |name: &str| match name {
        "AV1:ACC_PUMP_ROOM" => 0.6,
        "AV1:MAG_CORNER_X" => 0.3,
        "AV1:MAINS_MON" => 0.2,
        other => panic!("{other}"),
    };
    let mut aux_data = std::collections::HashMap::new();
    let (mut n_strain, mut n_aux) = (0, 0);
    for g in &truth {
        if let Some(rho) = recovered_snr(
            &strain,
            TARGET_RATE_HZ,
            s.start_gps,
            g.t_peak_gps,
            g.f0_hz,
            g.q,
            &target_psd,
        ) {
            let want = (g.snr_target.powi(2) + 2.0).sqrt();
            assert!((rho - want).abs() < 4.0, "strain {g:?}: recovered {rho}");
            n_strain += 1;
        }
        if let (Some(w), Some(lag), Some(snr_aux), Some(f_aux)) = (
            g.witness_channel.as_deref(),
            g.witness_lag_s,
            g.witness_snr,
            g.witness_f0_hz,
        ) {
            let c = aux_chan(w);
            let data = aux_data
                .entry(w.to_string())
                .or_insert_with(|| read_npy(&c.file));
            let fs = c.rate_hz;
            let a = ar1(w);
            let q_aux = g.q * f_aux / g.f0_hz;
            let psd = move |f: f64| ar1_psd(f, fs, a);
            if let Some(rho) = recovered_snr(
                data,
                fs,
                s.start_gps,
                g.t_peak_gps + lag,
                f_aux,
                q_aux,
                &psd,
            ) {
                let want = (snr_aux.powi(2) + 2.0).sqrt();
                assert!((rho - want).abs() < 4.0, "aux {w} {g:?}: recovered {rho}");
                n_aux += 1;
            }
        }
    }
    eprintln!("recovered {n_strain} strain and {n_aux} aux glitches");
    assert!(
        n_strain + 5 >= truth.len(),
        "only {n_strain} of {} checked",
        truth.len()
    );
    assert!(n_aux > 10);
}
