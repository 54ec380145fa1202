//! Demo scenario generator: an invented observatory ("Ashgrove Valley", site
//! prefix `AV1:`) with a strain channel, seven auxiliary sensors, four
//! injected glitch families with known witnesses, dropouts and analysis
//! segments. Later stages (scan, families, coupling, rates, report) are
//! checked against the `truth.csv` written here.
//!
//! Everything here is invented: channel names, family names, the noise model
//! and the couplings. A fixed seed gives byte-identical files.
//!
//! # Conventions
//! - One-sided PSDs \[unit²/Hz\]; white noise of variance σ² sampled at `fs`
//!   has PSD `2σ²/fs` (as in [`crate::condition`]).
//! - Sine-Gaussian: `h(t) = A exp(-(2π f0 (t-t0)/Q)²) sin(2π f0 (t-t0) + φ)`.
//! - Matched-filter SNR: `ρ² = 4 Σ_k |h̃(f_k)|² Δf / S(f_k)` with
//!   `h̃(f_k) = Δt · FFT(h)_k` (unnormalised FFT times the sample spacing).
//! - Witness lag = `t_aux − t_target` \[s\] (negative: the aux glitch comes first).
//! - Files: the strain and most aux channels are written as `<f4`; the
//!   mains monitor and the seismometer as `<f8` so readers see both dtypes.

use anyhow::{bail, Context, Result};
use rand::{Rng, RngCore, SeedableRng};
use rand_distr::{Distribution, Poisson, StandardNormal};
use rand_xoshiro::Xoshiro256Plus;
use rayon::prelude::*;
use realfft::num_complex::Complex;
use realfft::RealFftPlanner;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::f64::consts::PI;
use std::fmt::Write as _;
use std::path::{Path, PathBuf};

/// GPS time of the first sample of every channel \[GPS s\].
pub const GPS_START: f64 = 1_400_000_000.0;
/// Sample rate of the strain channel `AV1:STRAIN` \[Hz\].
pub const TARGET_RATE_HZ: f64 = 4096.0;
/// Name of the strain (target) channel.
pub const TARGET_CHANNEL: &str = "AV1:STRAIN";
/// Fraction of the span after which the late family ("moth") appears.
pub const LATE_FAMILY_FRACTION: f64 = 0.6;
/// Minimum spacing between two injected strain glitches \[s\].
pub const MIN_SPACING_S: f64 = 4.0;

/// Options of [`write_scenario`].
#[derive(Debug, Clone, PartialEq)]
pub struct DemoOptions {
    /// Seed of the random generator (Xoshiro256+); same seed, same files.
    pub seed: u64,
    /// Length of the scenario \[h\] (default 2.0), rounded to whole seconds;
    /// between 0.05 and 4 (peak memory grows by ~0.45 GB per hour: ~0.9 GB
    /// for 2 h with two threads).
    pub hours: f64,
}

impl Default for DemoOptions {
    fn default() -> Self {
        DemoOptions {
            seed: 1,
            hours: 2.0,
        }
    }
}

// ---------------------------------------------------------------------------
// Noise models
// ---------------------------------------------------------------------------

/// Floor of the strain PSD in the bucket: (8e-24 /√Hz)² \[1/Hz\].
const S0_PER_HZ: f64 = 6.4e-47;

/// Narrow spectral lines of the strain model: (centre \[Hz\], peak amplitude
/// spectral density \[1/√Hz\], Gaussian width σ \[Hz\]).
pub const TARGET_LINES: [(f64, f64, f64); 4] = [
    (50.0, 1.0e-21, 0.08),
    (100.0, 3.0e-22, 0.08),
    (150.0, 2.0e-22, 0.08),
    (503.2, 5.0e-22, 0.05),
];

/// Smooth (line-free) strain PSD model \[1/Hz\], our own invention:
/// `S(f) = S0 [ (f1²/(f² + fc²))⁴ + 1 + (f/f2)² ]` with `S0 = (8e-24)²`,
/// `f1 = 30 Hz` (steep f⁻⁸ wall below ~30 Hz), `fc = 10 Hz` (the wall levels
/// off below ~10 Hz so the time series stays of order 1e-21) and `f2 = 300 Hz`
/// (slow rise above ~300 Hz).
pub fn target_psd_smooth(f_hz: f64) -> f64 {
    let (f1, fc, f2) = (30.0, 10.0, 300.0);
    let wall = (f1 * f1 / (f_hz * f_hz + fc * fc)).powi(4);
    S0_PER_HZ * (wall + 1.0 + (f_hz / f2).powi(2))
}

/// Full strain PSD model \[1/Hz\]: [`target_psd_smooth`] plus the Gaussian
/// line profiles of [`TARGET_LINES`].
pub fn target_psd(f_hz: f64) -> f64 {
    // Beyond 12 σ a line adds < e⁻⁷² of its peak: skipped (and exp's slow
    // underflow path with it).
    let lines: f64 = TARGET_LINES
        .iter()
        .filter(|&&(f0, _, sigma)| (f_hz - f0).abs() < 12.0 * sigma)
        .map(|&(f0, asd, sigma)| asd * asd * (-0.5 * ((f_hz - f0) / sigma).powi(2)).exp())
        .sum();
    target_psd_smooth(f_hz) + lines
}

/// One-sided PSD \[unit²/Hz\] of the unit-variance AR(1) process
/// `y[n] = a y[n-1] + √(1-a²) w[n]` sampled at `fs_hz`:
/// `S(f) = 2(1-a²)/fs / (1 - 2a cos(2πf/fs) + a²)`.
pub fn ar1_psd(f_hz: f64, fs_hz: f64, a: f64) -> f64 {
    2.0 * (1.0 - a * a) / fs_hz / (1.0 - 2.0 * a * (2.0 * PI * f_hz / fs_hz).cos() + a * a)
}

/// Unit-variance AR(1) noise (see [`ar1_psd`]), started in its stationary state.
pub fn ar1_noise<R: Rng>(rng: &mut R, n: usize, a: f64) -> Vec<f64> {
    let innov = (1.0 - a * a).sqrt();
    let mut y: f64 = rng.sample(StandardNormal);
    (0..n)
        .map(|_| {
            let w: f64 = rng.sample(StandardNormal);
            y = a * y + innov * w;
            y
        })
        .collect()
}

/// Stationary Gaussian noise with one-sided PSD `psd(f)` \[unit²/Hz\], made
/// in the frequency domain with one inverse real FFT of length `n`: bin k
/// gets `√(n fs S(f_k)/2) · (a + i b)/√2` with a, b ~ N(0,1) (real at the
/// Nyquist bin, zero at DC), so `E|X_k|² = n fs S(f_k) / 2` and the series
/// `x = IFFT(X)/n` has PSD `S`. The result is periodic over `n` samples.
///
/// # Errors
/// `n < 2` or an FFT failure.
pub fn colored_gaussian_noise<R: Rng>(
    rng: &mut R,
    n: usize,
    fs_hz: f64,
    psd: &dyn Fn(f64) -> f64,
) -> Result<Vec<f64>> {
    if n < 2 {
        bail!("coloured noise: need at least 2 samples (got {n})");
    }
    let fft = RealFftPlanner::<f64>::new().plan_fft_inverse(n);
    let mut spec = fft.make_input_vec();
    let df = fs_hz / n as f64;
    let nyquist = if n.is_multiple_of(2) {
        Some(n / 2)
    } else {
        None
    };
    for (k, c) in spec.iter_mut().enumerate().skip(1) {
        let amp = (n as f64 * fs_hz * psd(k as f64 * df) / 2.0).sqrt();
        let a: f64 = rng.sample(StandardNormal);
        if Some(k) == nyquist {
            *c = Complex::new(amp * a, 0.0);
        } else {
            let b: f64 = rng.sample(StandardNormal);
            *c = Complex::new(amp * a, amp * b) * std::f64::consts::FRAC_1_SQRT_2;
        }
    }
    let mut out = fft.make_output_vec();
    fft.process(&mut spec, &mut out)
        .map_err(|e| anyhow::anyhow!("coloured noise: inverse FFT failed: {e}"))?;
    let scale = 1.0 / n as f64;
    out.iter_mut().for_each(|x| *x *= scale);
    Ok(out)
}

// ---------------------------------------------------------------------------
// Sine-Gaussians and their SNR
// ---------------------------------------------------------------------------

/// Unit-amplitude sine-Gaussian at offset `dt_s = t - t0` \[s\]:
/// `exp(-(2π f0 dt/Q)²) sin(2π f0 dt + φ)`.
pub fn sine_gaussian(dt_s: f64, f0_hz: f64, q: f64, phase_rad: f64) -> f64 {
    let x = 2.0 * PI * f0_hz * dt_s;
    (-(x / q).powi(2)).exp() * (x + phase_rad).sin()
}

/// Half-width \[s\] beyond which the sine-Gaussian envelope is below
/// e⁻²⁵ ≈ 1.4e-11 of its peak: `5 Q / (2π f0)`.
pub fn sine_gaussian_half_width_s(f0_hz: f64, q: f64) -> f64 {
    5.0 * q / (2.0 * PI * f0_hz)
}

/// Analytic `∫ h² dt` of a sine-Gaussian of amplitude `a` \[unit² s\], valid
/// when Q ≳ 3 (the oscillating cos(2x+2φ) term is dropped):
/// `∫ A² e^{-2(2πf0 t/Q)²} sin²(..) dt ≈ (A²/2) ∫ e^{-2(2πf0 t/Q)²} dt
///  = (A²/2) · √(π/2) · Q/(2π f0) = A² Q √(π/2) / (4π f0)`.
pub fn sine_gaussian_energy(a: f64, f0_hz: f64, q: f64) -> f64 {
    a * a * q * (PI / 2.0).sqrt() / (4.0 * PI * f0_hz)
}

pub use crate::waveforms::matched_filter_snr;

/// The unit-amplitude sine-Gaussian sampled at `fs_hz` on a window of
/// ± [`sine_gaussian_half_width_s`] centred on a sample.
fn sampled_unit_waveform(fs_hz: f64, f0_hz: f64, q: f64, phase_rad: f64) -> Vec<f64> {
    let m = (sine_gaussian_half_width_s(f0_hz, q) * fs_hz).ceil() as i64;
    (-m..=m)
        .map(|i| sine_gaussian(i as f64 / fs_hz, f0_hz, q, phase_rad))
        .collect()
}

/// Amplitude `A` that gives the sine-Gaussian matched-filter SNR `snr` in
/// noise of PSD `psd`, sampled at `fs_hz` (numerical, via [`matched_filter_snr`]).
pub fn amplitude_for_snr(
    snr: f64,
    fs_hz: f64,
    f0_hz: f64,
    q: f64,
    phase_rad: f64,
    psd: &dyn Fn(f64) -> f64,
) -> f64 {
    let h = sampled_unit_waveform(fs_hz, f0_hz, q, phase_rad);
    snr / matched_filter_snr(&h, fs_hz, psd)
}

// ---------------------------------------------------------------------------
// Truth records
// ---------------------------------------------------------------------------

/// One injected strain glitch (one row of `truth.csv`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TruthGlitch {
    /// Family name (invented: pebble, drum, kettle, moth).
    pub family: String,
    /// Peak time t0 of the sine-Gaussian \[GPS s\].
    pub t_peak_gps: f64,
    /// Central frequency f0 \[Hz\].
    pub f0_hz: f64,
    /// Quality factor Q.
    pub q: f64,
    /// Matched-filter SNR in the strain channel (model PSD).
    pub snr_target: f64,
    /// Witness channel, if a coincident aux glitch was injected.
    pub witness_channel: Option<String>,
    /// Witness lag `t_aux − t_target` \[s\].
    pub witness_lag_s: Option<f64>,
    /// Matched-filter SNR of the aux glitch in its channel's noise.
    pub witness_snr: Option<f64>,
    /// Central frequency of the aux glitch \[Hz\].
    pub witness_f0_hz: Option<f64>,
}

/// Read a `truth.csv` written by [`write_scenario`].
///
/// # Errors
/// Missing file, or a row that does not parse (the message names the file and line).
pub fn read_truth(path: &Path) -> Result<Vec<TruthGlitch>> {
    let mut rdr = csv::Reader::from_path(path)
        .with_context(|| format!("{}: cannot open truth file", path.display()))?;
    let mut out = Vec::new();
    for rec in rdr.deserialize::<TruthGlitch>() {
        match rec {
            Ok(g) => out.push(g),
            Err(e) => {
                let line = e.position().map(|p| p.line()).unwrap_or(0);
                bail!("{}:{line}: bad truth row: {e}", path.display());
            }
        }
    }
    Ok(out)
}

// ---------------------------------------------------------------------------
// Summary
// ---------------------------------------------------------------------------

/// One channel written by [`write_scenario`].
#[derive(Debug, Clone, Serialize)]
pub struct ChannelSummary {
    /// Channel name.
    pub name: String,
    /// Path of the `.npy` file.
    pub file: PathBuf,
    /// Sample rate \[Hz\].
    pub rate_hz: f64,
    /// `"target"` or `"aux"`.
    pub role: String,
    /// Number of samples.
    pub n_samples: usize,
    /// Element type written (`"<f4"` or `"<f8"`).
    pub dtype: String,
    /// Glitches injected in this channel (all causes).
    pub n_glitches: usize,
}

/// Injected counts of one strain glitch family.
#[derive(Debug, Clone, Serialize)]
pub struct FamilySummary {
    /// Family name.
    pub name: String,
    /// Glitches injected in the strain channel.
    pub n_injected: usize,
    /// Of which witnessed by an aux glitch.
    pub n_witnessed: usize,
    /// The witness channel (None for the unwitnessed family).
    pub witness_channel: Option<String>,
}

/// A NaN stretch \[GPS s\], half-open.
#[derive(Debug, Clone, Serialize)]
pub struct DropoutSummary {
    /// Channel with the dropout.
    pub channel: String,
    /// First NaN time \[GPS s\].
    pub start_gps: f64,
    /// End (exclusive) \[GPS s\].
    pub end_gps: f64,
}

/// What [`write_scenario`] wrote.
#[derive(Debug, Clone, Serialize)]
pub struct ScenarioSummary {
    /// Output directory.
    pub dir: PathBuf,
    /// `bundle.toml`.
    pub bundle_toml: PathBuf,
    /// `segments.txt`.
    pub segments_txt: PathBuf,
    /// `truth.csv`.
    pub truth_csv: PathBuf,
    /// `injections.csv`.
    pub injections_csv: PathBuf,
    /// `README.txt`.
    pub readme_txt: PathBuf,
    /// Seed used.
    pub seed: u64,
    /// Span start \[GPS s\].
    pub start_gps: f64,
    /// Span end \[GPS s\].
    pub end_gps: f64,
    /// Channels in bundle order.
    pub channels: Vec<ChannelSummary>,
    /// Strain glitch families.
    pub families: Vec<FamilySummary>,
    /// NaN stretches.
    pub dropouts: Vec<DropoutSummary>,
    /// The gap left out of `segments.txt` \[GPS s\] (start, end).
    pub segment_gap_gps: (f64, f64),
    /// Time from which the late family is injected \[GPS s\].
    pub late_family_start_gps: f64,
    /// Wall-clock time of the generation \[s\].
    pub elapsed_s: f64,
}

// ---------------------------------------------------------------------------
// Scenario definition
// ---------------------------------------------------------------------------

/// Noise of one channel.
#[derive(Debug, Clone, Copy)]
enum Noise {
    /// Coloured Gaussian with [`target_psd`].
    Strain,
    /// Unit-variance AR(1) with this coefficient.
    Ar1(f64),
}

impl Noise {
    fn psd(self, f_hz: f64, fs_hz: f64) -> f64 {
        match self {
            Noise::Strain => target_psd(f_hz),
            Noise::Ar1(a) => ar1_psd(f_hz, fs_hz, a),
        }
    }
}

/// Random glitches of a channel that are related to nothing.
#[derive(Debug, Clone, Copy)]
struct Background {
    per_hour: f64,
    f0_hz: (f64, f64),
    q: (f64, f64),
    snr: (f64, f64),
}

#[derive(Debug, Clone)]
struct ChannelDef {
    name: &'static str,
    rate_hz: f64,
    target: bool,
    band_hz: Option<(f64, f64)>,
    noise: Noise,
    as_f32: bool,
    background: Option<Background>,
    blurb: &'static str,
}

fn channel_defs() -> Vec<ChannelDef> {
    let bg = |per_hour, f0_hz, q, snr| {
        Some(Background {
            per_hour,
            f0_hz,
            q,
            snr,
        })
    };
    vec![
        ChannelDef {
            name: TARGET_CHANNEL,
            rate_hz: TARGET_RATE_HZ,
            target: true,
            band_hz: None,
            noise: Noise::Strain,
            as_f32: true,
            background: None,
            blurb: "strain; coloured Gaussian noise (model PSD below) plus the four families",
        },
        ChannelDef {
            name: "AV1:ACC_PUMP_ROOM",
            rate_hz: 2048.0,
            target: false,
            band_hz: None,
            noise: Noise::Ar1(0.6),
            as_f32: true,
            background: bg(15.0, (20.0, 80.0), (8.0, 20.0), (8.0, 60.0)),
            blurb: "accelerometer; witnesses 'drum' (90%, 15 ms before the strain)",
        },
        ChannelDef {
            name: "AV1:MAG_CORNER_X",
            rate_hz: 2048.0,
            target: false,
            band_hz: None,
            noise: Noise::Ar1(0.3),
            as_f32: true,
            background: bg(20.0, (300.0, 700.0), (20.0, 50.0), (8.0, 60.0)),
            blurb: "magnetometer; witnesses 'kettle' (80%, 2 ms after the strain)",
        },
        ChannelDef {
            name: "AV1:MAINS_MON",
            rate_hz: 1024.0,
            target: false,
            band_hz: None,
            noise: Noise::Ar1(0.2),
            as_f32: false,
            background: bg(10.0, (25.0, 70.0), (3.0, 6.0), (8.0, 60.0)),
            blurb: "mains monitor; witnesses 'moth' (85%, at half its frequency, no lag)",
        },
        ChannelDef {
            name: "AV1:SEIS_FLOOR_Z",
            rate_hz: 64.0,
            target: false,
            band_hz: Some((1.0, 16.0)),
            noise: Noise::Ar1(0.9),
            as_f32: false,
            background: bg(70.0, (2.0, 8.0), (3.0, 8.0), (8.0, 80.0)),
            blurb: "seismometer; unrelated low-frequency bursts (2-8 Hz)",
        },
        ChannelDef {
            name: "AV1:PD_TRANS_DC",
            rate_hz: 4096.0,
            target: false,
            band_hz: None,
            noise: Noise::Ar1(0.0),
            as_f32: true,
            background: bg(90.0, (50.0, 1500.0), (3.0, 30.0), (8.0, 80.0)),
            blurb: "photodiode; white noise, unrelated glitches",
        },
        ChannelDef {
            name: "AV1:ACC_HVAC",
            rate_hz: 512.0,
            target: false,
            band_hz: None,
            noise: Noise::Ar1(0.5),
            as_f32: true,
            background: bg(120.0, (15.0, 200.0), (4.0, 20.0), (8.0, 80.0)),
            blurb: "accelerometer; many unrelated glitches",
        },
        ChannelDef {
            name: "AV1:MIC_LASER_BAY",
            rate_hz: 256.0,
            target: false,
            band_hz: None,
            noise: Noise::Ar1(0.4),
            as_f32: true,
            background: bg(30.0, (10.0, 100.0), (4.0, 15.0), (8.0, 60.0)),
            blurb: "microphone; few unrelated glitches",
        },
    ]
}

/// How a family couples into an aux channel.
#[derive(Debug, Clone, Copy)]
struct Witness {
    channel: &'static str,
    prob: f64,
    lag_s: f64,
    freq_ratio: f64,
    snr_factor: f64,
    snr_floor: f64,
}

#[derive(Debug, Clone, Copy)]
struct FamilyDef {
    name: &'static str,
    per_hour: f64,
    f0_hz: (f64, f64),
    q: (f64, f64),
    late: bool,
    witness: Option<Witness>,
    blurb: &'static str,
}

fn family_defs() -> [FamilyDef; 4] {
    [
        FamilyDef {
            name: "pebble",
            per_hour: 50.0,
            f0_hz: (100.0, 300.0),
            q: (3.0, 6.0),
            late: false,
            witness: None,
            blurb: "short broadband, no witness (signal-like; times in injections.csv)",
        },
        FamilyDef {
            name: "drum",
            per_hour: 45.0,
            f0_hz: (25.0, 50.0),
            q: (12.0, 25.0),
            late: false,
            witness: Some(Witness {
                channel: "AV1:ACC_PUMP_ROOM",
                prob: 0.9,
                lag_s: -0.015,
                freq_ratio: 1.0,
                snr_factor: 1.5,
                snr_floor: 10.0,
            }),
            blurb: "low-frequency ringing",
        },
        FamilyDef {
            name: "kettle",
            per_hour: 55.0,
            f0_hz: (350.0, 650.0),
            q: (25.0, 50.0),
            late: false,
            witness: Some(Witness {
                channel: "AV1:MAG_CORNER_X",
                prob: 0.8,
                lag_s: 0.002,
                freq_ratio: 1.0,
                snr_factor: 1.2,
                snr_floor: 8.0,
            }),
            blurb: "long high-frequency tones",
        },
        FamilyDef {
            name: "moth",
            per_hour: 60.0,
            f0_hz: (60.0, 120.0),
            q: (6.0, 10.0),
            late: true,
            witness: Some(Witness {
                channel: "AV1:MAINS_MON",
                prob: 0.85,
                lag_s: 0.0,
                freq_ratio: 0.5,
                snr_factor: 1.3,
                snr_floor: 8.0,
            }),
            blurb: "mid-frequency, appears late (after 60% of the span)",
        },
    ]
}

/// An injection into one channel (amplitude set later from its SNR).
#[derive(Debug, Clone, Copy)]
struct Injection {
    t0_gps: f64,
    f0_hz: f64,
    q: f64,
    phase_rad: f64,
    snr: f64,
}

/// Draw from p(ρ) ∝ ρ⁻³ on [lo, hi] by inverting the CDF.
fn power_law_snr<R: Rng>(rng: &mut R, lo: f64, hi: f64) -> f64 {
    let u: f64 = rng.gen();
    let (a, b) = (lo.powi(-2), hi.powi(-2));
    (a - u * (a - b)).powf(-0.5)
}

/// Strain SNR: ρ⁻³ between 6 and 60, and 3% louder ones (ρ⁻³ between 60 and 300).
fn target_snr<R: Rng>(rng: &mut R) -> f64 {
    if rng.gen_bool(0.03) {
        power_law_snr(rng, 60.0, 300.0)
    } else {
        power_law_snr(rng, 6.0, 60.0)
    }
}

fn uniform<R: Rng>(rng: &mut R, (lo, hi): (f64, f64)) -> f64 {
    lo + (hi - lo) * rng.gen::<f64>()
}

fn file_name(channel: &str) -> String {
    format!("{}.npy", channel.replace(':', "-"))
}

/// Write the demo scenario into `dir` (created if needed): `bundle.toml`, one
/// `.npy` per channel, `segments.txt`, `truth.csv`, `injections.csv` and
/// `README.txt`. Channels are generated in parallel (rayon), each from its
/// own seeded generator, so the files do not depend on the thread count.
///
/// Dropouts and the segment gap are 90 s, 200 s (strain), 60 s (aux) and
/// 360 s for spans of 2 h or more, scaled down in proportion for shorter spans.
///
/// # Errors
/// Bad options (`hours` not in \[0.05, 4\]) or a file that cannot be written.
pub fn write_scenario(dir: &Path, opts: &DemoOptions) -> Result<ScenarioSummary> {
    let clock = std::time::Instant::now();
    if !(opts.hours.is_finite() && (0.05..=4.0).contains(&opts.hours)) {
        bail!(
            "demo: hours must be between 0.05 and 4 (got {})",
            opts.hours
        );
    }
    std::fs::create_dir_all(dir).with_context(|| format!("creating {}", dir.display()))?;
    let span_s = (opts.hours * 3600.0).round();
    let start = GPS_START;
    let end = start + span_s;
    let scale = (span_s / 7200.0).min(1.0);
    let at = |frac: f64| (start + frac * span_s).round();

    // Dropouts (NaN) and the segment gap, at fixed fractions of the span.
    let dropouts = vec![
        DropoutSummary {
            channel: TARGET_CHANNEL.into(),
            start_gps: at(0.22),
            end_gps: at(0.22) + 90.0 * scale,
        },
        DropoutSummary {
            channel: TARGET_CHANNEL.into(),
            start_gps: at(0.78),
            end_gps: at(0.78) + 200.0 * scale,
        },
        DropoutSummary {
            channel: "AV1:MAG_CORNER_X".into(),
            start_gps: at(0.33),
            end_gps: at(0.33) + 60.0 * scale,
        },
    ];
    let gap = (at(0.5), at(0.5) + 360.0 * scale);
    let late_start = start + LATE_FAMILY_FRACTION * span_s;

    let mut rng = Xoshiro256Plus::seed_from_u64(opts.seed);
    let defs = channel_defs();
    let fams = family_defs();

    // Strain glitches, family by family, with the 4 s spacing and clear of dropouts.
    let edge_s = 10.0_f64.min(span_s / 20.0);
    let mut truth: Vec<TruthGlitch> = Vec::new();
    let mut aux_inj: BTreeMap<&str, Vec<Injection>> = BTreeMap::new();
    let mut target_inj: Vec<Injection> = Vec::new();
    for fam in &fams {
        let t_lo = if fam.late { late_start } else { start } + edge_s;
        let t_hi = end - edge_s;
        let mean = fam.per_hour * (t_hi - t_lo) / 3600.0;
        let count = Poisson::new(mean)
            .map(|p| p.sample(&mut rng) as usize)
            .unwrap_or(0);
        for _ in 0..count {
            let mut tries = 0;
            let t0 = loop {
                tries += 1;
                if tries > 100_000 {
                    bail!(
                        "demo: cannot place {count} '{}' glitches 4 s apart",
                        fam.name
                    );
                }
                let t = uniform(&mut rng, (t_lo, t_hi));
                let clear_of_glitches = truth
                    .iter()
                    .all(|g| (g.t_peak_gps - t).abs() >= MIN_SPACING_S);
                let clear_of_dropouts = dropouts
                    .iter()
                    .all(|d| t < d.start_gps - 2.0 || t > d.end_gps + 2.0);
                if clear_of_glitches && clear_of_dropouts {
                    break t;
                }
            };
            let f0 = uniform(&mut rng, fam.f0_hz);
            let q = uniform(&mut rng, fam.q);
            let phase = uniform(&mut rng, (0.0, 2.0 * PI));
            let snr = target_snr(&mut rng);
            target_inj.push(Injection {
                t0_gps: t0,
                f0_hz: f0,
                q,
                phase_rad: phase,
                snr,
            });
            let mut row = TruthGlitch {
                family: fam.name.into(),
                t_peak_gps: t0,
                f0_hz: f0,
                q,
                snr_target: snr,
                witness_channel: None,
                witness_lag_s: None,
                witness_snr: None,
                witness_f0_hz: None,
            };
            if let Some(w) = fam.witness {
                let seen = rng.gen_bool(w.prob);
                let aux_phase = uniform(&mut rng, (0.0, 2.0 * PI));
                if seen {
                    let aux_snr = (w.snr_factor * snr).max(w.snr_floor);
                    let aux_f0 = w.freq_ratio * f0;
                    // Same envelope duration in time: Q scales with f0.
                    let aux_q = w.freq_ratio * q;
                    aux_inj.entry(w.channel).or_default().push(Injection {
                        t0_gps: t0 + w.lag_s,
                        f0_hz: aux_f0,
                        q: aux_q,
                        phase_rad: aux_phase,
                        snr: aux_snr,
                    });
                    row.witness_channel = Some(w.channel.into());
                    row.witness_lag_s = Some(w.lag_s);
                    row.witness_snr = Some(aux_snr);
                    row.witness_f0_hz = Some(aux_f0);
                }
            }
            truth.push(row);
        }
    }

    // Unrelated aux glitches.
    for def in &defs {
        if let Some(bg) = def.background {
            let count = Poisson::new(bg.per_hour * span_s / 3600.0)
                .map(|p| p.sample(&mut rng) as usize)
                .unwrap_or(0);
            let list = aux_inj.entry(def.name).or_default();
            for _ in 0..count {
                let t0 = uniform(&mut rng, (start + 1.0, end - 1.0));
                let f0 = uniform(&mut rng, bg.f0_hz);
                let q = uniform(&mut rng, bg.q);
                let phase = uniform(&mut rng, (0.0, 2.0 * PI));
                let snr = power_law_snr(&mut rng, bg.snr.0, bg.snr.1);
                list.push(Injection {
                    t0_gps: t0,
                    f0_hz: f0,
                    q,
                    phase_rad: phase,
                    snr,
                });
            }
        }
    }

    // One noise seed per channel, drawn in bundle order.
    let seeds: Vec<u64> = defs.iter().map(|_| rng.next_u64()).collect();

    let summaries: Vec<ChannelSummary> = defs
        .par_iter()
        .zip(seeds.par_iter())
        .map(|(def, &seed)| {
            let inj: &[Injection] = if def.target {
                &target_inj
            } else {
                aux_inj.get(def.name).map(|v| v.as_slice()).unwrap_or(&[])
            };
            let drops: Vec<(f64, f64)> = dropouts
                .iter()
                .filter(|d| d.channel == def.name)
                .map(|d| (d.start_gps, d.end_gps))
                .collect();
            write_channel(dir, def, seed, start, span_s, inj, &drops)
        })
        .collect::<Result<Vec<_>>>()?;

    truth.sort_by(|a, b| a.t_peak_gps.total_cmp(&b.t_peak_gps));

    // bundle.toml
    let mut toml = String::from(
        "# Demo bundle: invented observatory \"Ashgrove Valley\" (AV1). See README.txt.\n",
    );
    for (def, s) in defs.iter().zip(&summaries) {
        let _ = write!(
            toml,
            "\n[[channel]]\nname = \"{}\"\nfile = \"{}\"\nrate = {:.1}\nstart = {:.1}\nrole = \"{}\"\n",
            def.name,
            file_name(def.name),
            def.rate_hz,
            start,
            s.role
        );
        if let Some((lo, hi)) = def.band_hz {
            let _ = writeln!(toml, "fmin = {lo:.1}\nfmax = {hi:.1}");
        }
    }
    let bundle_toml = dir.join("bundle.toml");
    write_text(&bundle_toml, &toml)?;

    // segments.txt
    let segments_txt = dir.join("segments.txt");
    write_text(
        &segments_txt,
        &format!(
            "# analysis segments [GPS s]: start end (the span minus one gap)\n{start:.1} {:.1}\n{:.1} {end:.1}\n",
            gap.0, gap.1
        ),
    )?;

    // truth.csv
    let truth_csv = dir.join("truth.csv");
    {
        let mut w = csv::Writer::from_path(&truth_csv)
            .with_context(|| format!("creating {}", truth_csv.display()))?;
        for g in &truth {
            w.serialize(g)
                .with_context(|| format!("writing {}", truth_csv.display()))?;
        }
        w.flush()
            .with_context(|| format!("writing {}", truth_csv.display()))?;
    }

    // injections.csv: the unwitnessed, signal-like family.
    let injections_csv = dir.join("injections.csv");
    let mut inj_text = String::from("time\n");
    for g in truth.iter().filter(|g| g.family == "pebble") {
        let _ = writeln!(inj_text, "{}", g.t_peak_gps);
    }
    write_text(&injections_csv, &inj_text)?;

    let families: Vec<FamilySummary> = fams
        .iter()
        .map(|f| FamilySummary {
            name: f.name.into(),
            n_injected: truth.iter().filter(|g| g.family == f.name).count(),
            n_witnessed: truth
                .iter()
                .filter(|g| g.family == f.name && g.witness_channel.is_some())
                .count(),
            witness_channel: f.witness.map(|w| w.channel.to_string()),
        })
        .collect();

    let readme_txt = dir.join("README.txt");
    write_text(
        &readme_txt,
        &readme(
            opts, span_s, &defs, &summaries, &fams, &families, &dropouts, gap, late_start,
        ),
    )?;

    Ok(ScenarioSummary {
        dir: dir.to_path_buf(),
        bundle_toml,
        segments_txt,
        truth_csv,
        injections_csv,
        readme_txt,
        seed: opts.seed,
        start_gps: start,
        end_gps: end,
        channels: summaries,
        families,
        dropouts,
        segment_gap_gps: gap,
        late_family_start_gps: late_start,
        elapsed_s: clock.elapsed().as_secs_f64(),
    })
}

fn write_text(path: &Path, text: &str) -> Result<()> {
    std::fs::write(path, text).with_context(|| format!("writing {}", path.display()))
}

/// Generate, inject, blank and write one channel.
fn write_channel(
    dir: &Path,
    def: &ChannelDef,
    seed: u64,
    start_gps: f64,
    span_s: f64,
    inj: &[Injection],
    drops: &[(f64, f64)],
) -> Result<ChannelSummary> {
    let fs = def.rate_hz;
    let n = (span_s * fs).round() as usize;
    let mut rng = Xoshiro256Plus::seed_from_u64(seed);
    let noise = def.noise;
    let mut data = match noise {
        Noise::Strain => colored_gaussian_noise(&mut rng, n, fs, &target_psd)?,
        Noise::Ar1(a) => ar1_noise(&mut rng, n, a),
    };
    let psd = move |f: f64| noise.psd(f, fs);
    for g in inj {
        let amp = amplitude_for_snr(g.snr, fs, g.f0_hz, g.q, g.phase_rad, &psd);
        let hw = sine_gaussian_half_width_s(g.f0_hz, g.q);
        let i0 = (((g.t0_gps - hw - start_gps) * fs).ceil().max(0.0)) as usize;
        let i1 = ((((g.t0_gps + hw - start_gps) * fs).floor() + 1.0).max(0.0) as usize).min(n);
        for (i, x) in data.iter_mut().enumerate().take(i1).skip(i0) {
            let dt = start_gps + i as f64 / fs - g.t0_gps;
            *x += amp * sine_gaussian(dt, g.f0_hz, g.q, g.phase_rad);
        }
    }
    for &(t_a, t_b) in drops {
        let i0 = (((t_a - start_gps) * fs).ceil().max(0.0) as usize).min(n);
        let i1 = (((t_b - start_gps) * fs).ceil().max(0.0) as usize).min(n);
        data[i0..i1].iter_mut().for_each(|x| *x = f64::NAN);
    }
    let file = dir.join(file_name(def.name));
    crate::io::write_npy(&file, &data, def.as_f32)?;
    Ok(ChannelSummary {
        name: def.name.into(),
        file,
        rate_hz: fs,
        role: if def.target { "target" } else { "aux" }.into(),
        n_samples: n,
        dtype: if def.as_f32 { "<f4" } else { "<f8" }.into(),
        n_glitches: inj.len(),
    })
}

#[allow(clippy::too_many_arguments)]
fn readme(
    opts: &DemoOptions,
    span_s: f64,
    defs: &[ChannelDef],
    chans: &[ChannelSummary],
    fams: &[FamilyDef],
    fam_counts: &[FamilySummary],
    dropouts: &[DropoutSummary],
    gap: (f64, f64),
    late_start: f64,
) -> String {
    let mut s = String::new();
    let _ = writeln!(
        s,
        "glitchbook demo scenario: the invented \"Ashgrove Valley\" observatory (site AV1)\n\
         =============================================================================\n\
         Everything here is made up for testing: names, noise, glitches and couplings.\n\n\
         seed {}, span {span_s} s from GPS {GPS_START:.0} to {:.0}\n",
        opts.seed,
        GPS_START + span_s
    );
    let _ = writeln!(s, "Channels (bundle.toml; NaN samples are dropouts)");
    for (d, c) in defs.iter().zip(chans) {
        let _ = writeln!(
            s,
            "  {:<20} {:>6.0} Hz  {:<6} {}  {} injected glitches: {}",
            d.name, d.rate_hz, c.role, c.dtype, c.n_glitches, d.blurb
        );
    }
    let _ = writeln!(
        s,
        "\nStrain noise: Gaussian, one-sided PSD\n  S(f) = S0 [ (f1^2/(f^2+fc^2))^4 + 1 + (f/f2)^2 ] + lines,\n  \
         S0 = (8e-24)^2 /Hz, f1 = 30 Hz, fc = 10 Hz, f2 = 300 Hz;\n  lines (centre Hz, peak ASD /sqrt(Hz), Gaussian width Hz):"
    );
    for (f, a, w) in TARGET_LINES {
        let _ = writeln!(s, "    {f} Hz, {a:e}, {w}");
    }
    let _ = writeln!(
        s,
        "Aux noise: unit-variance AR(1) (arbitrary units); aux glitch SNRs are against that noise.\n\n\
         Strain glitch families (sine-Gaussians A exp(-(2 pi f0 (t-t0)/Q)^2) sin(2 pi f0 (t-t0) + phi);\n\
         A set so the matched-filter SNR against the model PSD equals the drawn SNR;\n\
         SNR ~ rho^-3 on [6, 60], 3% drawn on [60, 300]; no two closer than {MIN_SPACING_S} s;\n\
         none within 2 s of a dropout):"
    );
    for (f, c) in fams.iter().zip(fam_counts) {
        let _ = writeln!(
            s,
            "  {:<7} {:>3} injected, f0 {}-{} Hz, Q {}-{}, ~{}/h: {}",
            f.name, c.n_injected, f.f0_hz.0, f.f0_hz.1, f.q.0, f.q.1, f.per_hour, f.blurb
        );
        if let Some(w) = f.witness {
            let _ = writeln!(
                s,
                "          witness {} in {:.0}% ({} rows): lag t_aux - t_strain = {} s, f_aux = {} x f0, \
                 Q_aux = {} x Q (same duration), aux SNR = max({} x SNR, {})",
                w.channel,
                100.0 * w.prob,
                c.n_witnessed,
                w.lag_s,
                w.freq_ratio,
                w.freq_ratio,
                w.snr_factor,
                w.snr_floor
            );
        }
    }
    let _ = writeln!(
        s,
        "  late family 'moth' starts at GPS {late_start}\n\nDropouts (NaN):"
    );
    for d in dropouts {
        let _ = writeln!(s, "  {:<20} [{}, {})", d.channel, d.start_gps, d.end_gps);
    }
    let _ = writeln!(
        s,
        "\nFiles\n  segments.txt    analysis segments (the span minus the gap [{}, {}))\n  \
         truth.csv       one row per strain glitch: family, t_peak_gps, f0_hz, q, snr_target,\n                  \
         witness_channel, witness_lag_s, witness_snr, witness_f0_hz (empty when unwitnessed)\n  \
         injections.csv  column `time`: the 'pebble' times, to be used as signal injections\n                  \
         for veto safety checks (some fall in the segment gap)",
        gap.0, gap.1
    );
    s
}

/// Length of each demo frame file \[s\] (`demo --format gwf`).
pub const DEMO_FRAME_S: f64 = 256.0;

/// Turn a demo bundle written by [`write_scenario`] into frame files: every
/// channel of `DIR/bundle.toml` goes into `DIR/frames/AV1-DEMO-GPS-DUR.gwf`
/// files of `frame_s` seconds (one frame each, processed-data channels,
/// samples in the `.npy` file's type, gzip level 1), `bundle.toml` is
/// rewritten to name them (`format = "gwf"`, `dir = "frames"`) and the
/// `.npy` files are removed. Returns the frame files written.
///
/// # Errors
/// A bundle that cannot be read, channels that do not share one start and
/// length, or a file that cannot be written.
pub fn convert_to_frames(dir: &Path, frame_s: f64) -> Result<Vec<PathBuf>> {
    use crate::io::gwf::writer::{ChannelData, GwfWriter, Samples};
    use crate::io::gwf::{ChannelKind, Compression};
    use crate::scan::SampleSource;
    let bundle = crate::io::Bundle::open(dir)?;
    let chans = &bundle.channels;
    let start = chans.first().context("demo bundle has no channel")?.start;
    let mut span_s = f64::NAN;
    let mut srcs = Vec::with_capacity(chans.len());
    for c in chans {
        let r = crate::io::NpyReader::open(&c.file)?;
        let s = r.len as f64 / c.rate;
        if c.start != start || (span_s.is_finite() && s != span_s) {
            bail!(
                "{}: channels do not share one start and length",
                c.file.display()
            );
        }
        span_s = s;
        srcs.push((r.dtype, crate::io::ChannelSource::open(c)?));
    }
    let frames_dir = dir.join("frames");
    std::fs::create_dir_all(&frames_dir)
        .with_context(|| format!("creating {}", frames_dir.display()))?;
    let mut written = Vec::new();
    let mut t = 0.0;
    while t < span_s {
        let dur = frame_s.min(span_s - t);
        let t_gps = start + t;
        let mut f64s: Vec<Vec<f64>> = Vec::with_capacity(chans.len());
        for (c, (_, src)) in chans.iter().zip(&srcs) {
            let i0 = (t * c.rate).round() as usize;
            let n = (dur * c.rate).round() as usize;
            let mut buf = vec![0.0; n];
            src.read(i0, &mut buf)?;
            f64s.push(buf);
        }
        let f32s: Vec<Vec<f32>> = f64s
            .iter()
            .zip(&srcs)
            .map(|(x, (dt, _))| match dt {
                crate::io::NpyDtype::F32 => x.iter().map(|&v| v as f32).collect(),
                crate::io::NpyDtype::F64 => Vec::new(),
            })
            .collect();
        let data: Vec<ChannelData> = chans
            .iter()
            .zip(f64s.iter().zip(&f32s))
            .zip(&srcs)
            .map(|((c, (x64, x32)), (dt, _))| {
                let samples = match dt {
                    crate::io::NpyDtype::F32 => Samples::F32(x32),
                    crate::io::NpyDtype::F64 => Samples::F64(x64),
                };
                ChannelData::new(
                    &c.name,
                    ChannelKind::Proc,
                    c.rate,
                    samples,
                    Compression::Gzip,
                )
            })
            .collect();
        let path = frames_dir.join(format!("AV1-DEMO-{}-{}.gwf", t_gps.round(), dur.round()));
        let mut w = GwfWriter::create(&path, 1)?;
        w.write_frame(crate::catalogue::to_ns(t_gps)?, dur, 0, &data)?;
        w.finish()?;
        written.push(path);
        t += dur;
    }
    // bundle.toml names the frame files instead of the .npy files.
    let toml_path = dir.join("bundle.toml");
    let mut text = std::fs::read_to_string(&toml_path)
        .with_context(|| format!("reading {}", toml_path.display()))?;
    for c in chans {
        let name = c.file.file_name().and_then(|n| n.to_str()).unwrap_or("");
        text = text.replace(
            &format!("file = \"{name}\"\n"),
            "format = \"gwf\"\ndir = \"frames\"\n",
        );
    }
    write_text(&toml_path, &text)?;
    let readme = dir.join("README.txt");
    if let Ok(mut r) = std::fs::read_to_string(&readme) {
        let _ = write!(
            r,
            "\nWritten as frame files (demo --format gwf): every channel is in \
             frames/AV1-DEMO-GPS-DUR.gwf ({} files of {frame_s} s, processed-data \
             channels, gzip); bundle.toml names them and the .npy files above were \
             not kept.\n",
            written.len()
        );
        write_text(&readme, &r)?;
    }
    for c in chans {
        std::fs::remove_file(&c.file).with_context(|| format!("removing {}", c.file.display()))?;
    }
    Ok(written)
}
