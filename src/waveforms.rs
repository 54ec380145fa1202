//! Glitch waveforms for scenarios and tests: sine-Gaussians, short
//! broadband pulses, long tonal bursts, upward sweeps (chirps),
//! low-frequency arches and signal-like inspiral chirps, each sampled at any
//! offset, with its time-frequency track and its matched-filter SNR in a
//! given noise PSD.
//!
//! # Conventions
//! - Times are offsets `dt = t − t_c` \[s\] from the waveform's reference
//!   time `t_c` (the centre of its envelope); frequencies in Hz.
//! - Every waveform has unit peak envelope; scale by an amplitude to set
//!   the SNR ([`Waveform::amplitude_for_snr`]).
//! - Matched-filter SNR: `ρ² = 4 Σ_k |h̃(f_k)|² Δf / S(f_k)`, `h̃ = FFT(h)/fs`
//!   (the optimal SNR of the whitened waveform; e.g. Allen et al. 2012,
//!   Phys. Rev. D 85, 122006, Eq. 2.4 with the template equal to the signal).
//! - Smooth envelopes: a Gaussian for sine-Gaussians and pulses, a Tukey
//!   (raised-cosine edges) for tones, sweeps and arches, so that the
//!   spectrum has no sharp-edge leakage.

use realfft::RealFftPlanner;
use serde::{Deserialize, Serialize};
use std::f64::consts::PI;

/// One glitch waveform (unit peak envelope).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum Waveform {
    /// `exp(−(2π f0 dt / Q)²) sin(2π f0 dt + φ)`: a sine-Gaussian. With a Q
    /// of 2–4 it is a short broadband pulse.
    SineGaussian {
        /// Central frequency \[Hz\].
        f0_hz: f64,
        /// Quality factor.
        q: f64,
        /// Phase at the centre \[rad\].
        phase_rad: f64,
    },
    /// A tone of constant frequency under a Tukey envelope of total
    /// length `duration_s` with raised-cosine edges of `edge_frac` of it
    /// on each side.
    Tone {
        /// Frequency \[Hz\].
        f0_hz: f64,
        /// Envelope length \[s\].
        duration_s: f64,
        /// Fraction of the length in each raised-cosine edge (0..0.5).
        edge_frac: f64,
        /// Phase at the centre \[rad\].
        phase_rad: f64,
    },
    /// An upward (or downward) sweep whose frequency moves geometrically
    /// from `f_start_hz` to `f_end_hz` over `duration_s`:
    /// `f(τ) = f_s (f_e / f_s)^(τ/T)` for `τ = dt + T/2` in `[0, T]`.
    Sweep {
        /// Frequency at the start \[Hz\].
        f_start_hz: f64,
        /// Frequency at the end \[Hz\].
        f_end_hz: f64,
        /// Length \[s\].
        duration_s: f64,
        /// Fraction of the length in each raised-cosine edge (0..0.5).
        edge_frac: f64,
        /// Phase at the start \[rad\].
        phase_rad: f64,
    },
    /// An arch: the frequency rises from `f_edge_hz` to `f_top_hz` and back
    /// over `duration_s` along a half sine, `f(τ) = f_e + (f_t − f_e)
    /// sin(π τ / T)` (the shape of light scattered by a slowly swinging
    /// surface, whose fringe frequency follows its velocity; common
    /// practice to model it so).
    Arch {
        /// Frequency at the top of the arch \[Hz\].
        f_top_hz: f64,
        /// Frequency at both ends \[Hz\].
        f_edge_hz: f64,
        /// Length \[s\].
        duration_s: f64,
        /// Fraction of the length in each raised-cosine edge (0..0.5).
        edge_frac: f64,
        /// Phase at the start \[rad\].
        phase_rad: f64,
    },
    /// A signal-like chirp following the leading-order (Newtonian) law of a
    /// compact-binary inspiral: `f(τ) = f_s (1 − τ/τ_c)^(−3/8)` with
    /// `τ_c = T / (1 − (f_s/f_e)^(8/3))`, so the frequency reaches `f_end_hz`
    /// at `τ = T`, and amplitude `(f(τ)/f_e)^(2/3)` (unit at the end), both
    /// the textbook quadrupole-order forms (e.g. Maggiore 2008,
    /// *Gravitational Waves* vol. 1, ch. 4; from memory), under a Tukey
    /// envelope (`τ = dt + T/2` in `[0, T]`). Invented data only: no merger
    /// or ringdown.
    Chirp {
        /// Frequency at the start \[Hz\].
        f_start_hz: f64,
        /// Frequency at the end \[Hz\] (above `f_start_hz`).
        f_end_hz: f64,
        /// Length \[s\].
        duration_s: f64,
        /// Fraction of the length in each raised-cosine edge (0..0.5).
        edge_frac: f64,
        /// Phase at the start \[rad\].
        phase_rad: f64,
    },
}

/// `τ_c` of a [`Waveform::Chirp`]: the time from its start to coalescence \[s\].
fn chirp_tau_c(f_start_hz: f64, f_end_hz: f64, duration_s: f64) -> f64 {
    duration_s / (1.0 - (f_start_hz / f_end_hz).powf(8.0 / 3.0))
}

/// Tukey envelope at `τ ∈ [0, T]` with raised-cosine edges of `e T`.
fn tukey_env(tau: f64, t: f64, e: f64) -> f64 {
    if !(0.0..=t).contains(&tau) {
        return 0.0;
    }
    let edge = (e.clamp(0.0, 0.5) * t).max(f64::MIN_POSITIVE);
    let d = tau.min(t - tau);
    if d >= edge {
        1.0
    } else {
        0.5 * (1.0 - (PI * d / edge).cos())
    }
}

impl Waveform {
    /// Value at offset `dt_s` from the reference time (unit peak envelope).
    pub fn value(&self, dt_s: f64) -> f64 {
        match *self {
            Waveform::SineGaussian {
                f0_hz,
                q,
                phase_rad,
            } => {
                let x = 2.0 * PI * f0_hz * dt_s;
                (-(x / q).powi(2)).exp() * (x + phase_rad).sin()
            }
            Waveform::Tone {
                f0_hz,
                duration_s,
                edge_frac,
                phase_rad,
            } => {
                let tau = dt_s + 0.5 * duration_s;
                tukey_env(tau, duration_s, edge_frac) * (2.0 * PI * f0_hz * dt_s + phase_rad).sin()
            }
            Waveform::Sweep {
                f_start_hz,
                f_end_hz,
                duration_s,
                edge_frac,
                phase_rad,
            } => {
                let tau = dt_s + 0.5 * duration_s;
                let env = tukey_env(tau, duration_s, edge_frac);
                if env == 0.0 {
                    return 0.0;
                }
                let r = f_end_hz / f_start_hz;
                // φ(τ) = 2π ∫0^τ f = 2π f_s T (r^(τ/T) − 1) / ln r (→ 2π f_s τ as r → 1).
                let phase = if (r - 1.0).abs() < 1e-12 {
                    2.0 * PI * f_start_hz * tau
                } else {
                    2.0 * PI * f_start_hz * duration_s * (r.powf(tau / duration_s) - 1.0) / r.ln()
                };
                env * (phase + phase_rad).sin()
            }
            Waveform::Arch {
                f_top_hz,
                f_edge_hz,
                duration_s,
                edge_frac,
                phase_rad,
            } => {
                let tau = dt_s + 0.5 * duration_s;
                let env = tukey_env(tau, duration_s, edge_frac);
                if env == 0.0 {
                    return 0.0;
                }
                // φ(τ) = 2π [f_e τ + (f_t − f_e) T/π (1 − cos(π τ / T))].
                let phase = 2.0
                    * PI
                    * (f_edge_hz * tau
                        + (f_top_hz - f_edge_hz) * duration_s / PI
                            * (1.0 - (PI * tau / duration_s).cos()));
                env * (phase + phase_rad).sin()
            }
            Waveform::Chirp {
                f_start_hz,
                f_end_hz,
                duration_s,
                edge_frac,
                phase_rad,
            } => {
                let tau = dt_s + 0.5 * duration_s;
                let env = tukey_env(tau, duration_s, edge_frac);
                if env == 0.0 {
                    return 0.0;
                }
                let tc = chirp_tau_c(f_start_hz, f_end_hz, duration_s);
                let x = (1.0 - tau / tc).max(f64::MIN_POSITIVE);
                // φ(τ) = 2π ∫0^τ f = 2π f_s τ_c (8/5) [1 − (1 − τ/τ_c)^(5/8)].
                let phase = 2.0 * PI * f_start_hz * tc * 1.6 * (1.0 - x.powf(0.625));
                let f = f_start_hz * x.powf(-0.375);
                env * (f / f_end_hz).powf(2.0 / 3.0) * (phase + phase_rad).sin()
            }
        }
    }

    /// Half-width \[s\] of the support around the reference time: beyond it
    /// the waveform is zero (tones, sweeps, arches) or below e⁻²⁵ of its
    /// peak (sine-Gaussians: `5 Q / (2π f0)`).
    pub fn half_width_s(&self) -> f64 {
        match *self {
            Waveform::SineGaussian { f0_hz, q, .. } => 5.0 * q / (2.0 * PI * f0_hz),
            Waveform::Tone { duration_s, .. }
            | Waveform::Sweep { duration_s, .. }
            | Waveform::Arch { duration_s, .. }
            | Waveform::Chirp { duration_s, .. } => 0.5 * duration_s,
        }
    }

    /// Instantaneous frequency \[Hz\] at offset `dt_s` (the centre
    /// frequency for sine-Gaussians), or None outside the support.
    pub fn frequency_at(&self, dt_s: f64) -> Option<f64> {
        if dt_s.abs() > self.half_width_s() {
            return None;
        }
        Some(match *self {
            Waveform::SineGaussian { f0_hz, .. } | Waveform::Tone { f0_hz, .. } => f0_hz,
            Waveform::Sweep {
                f_start_hz,
                f_end_hz,
                duration_s,
                ..
            } => {
                let tau = dt_s + 0.5 * duration_s;
                f_start_hz * (f_end_hz / f_start_hz).powf(tau / duration_s)
            }
            Waveform::Arch {
                f_top_hz,
                f_edge_hz,
                duration_s,
                ..
            } => {
                let tau = dt_s + 0.5 * duration_s;
                f_edge_hz + (f_top_hz - f_edge_hz) * (PI * tau / duration_s).sin()
            }
            Waveform::Chirp {
                f_start_hz,
                f_end_hz,
                duration_s,
                ..
            } => {
                let tau = dt_s + 0.5 * duration_s;
                let tc = chirp_tau_c(f_start_hz, f_end_hz, duration_s);
                f_start_hz * (1.0 - tau / tc).max(f64::MIN_POSITIVE).powf(-0.375)
            }
        })
    }

    /// Time-frequency box of the waveform: `(dt_lo, dt_hi, f_lo, f_hi)`
    /// \[s, Hz\], offsets from the reference time. Sine-Gaussians use the
    /// extents of a tile of their Q (`t ± Q/(2π f0)`, `f ± 2 f0/Q`, as in
    /// [`crate::tf`]); tones their support and `f0 ± 1/T`; sweeps, arches
    /// and chirps their support and frequency range.
    pub fn extent(&self) -> (f64, f64, f64, f64) {
        match *self {
            Waveform::SineGaussian { f0_hz, q, .. } => {
                let ht = q / (2.0 * PI * f0_hz);
                let hf = 2.0 * f0_hz / q;
                (-ht, ht, (f0_hz - hf).max(0.0), f0_hz + hf)
            }
            Waveform::Tone {
                f0_hz, duration_s, ..
            } => {
                // Bandwidth of order 1/T around the tone.
                let hf = 1.0 / duration_s;
                (-0.5 * duration_s, 0.5 * duration_s, f0_hz - hf, f0_hz + hf)
            }
            Waveform::Sweep {
                f_start_hz,
                f_end_hz,
                duration_s,
                ..
            }
            | Waveform::Chirp {
                f_start_hz,
                f_end_hz,
                duration_s,
                ..
            } => (
                -0.5 * duration_s,
                0.5 * duration_s,
                f_start_hz.min(f_end_hz),
                f_start_hz.max(f_end_hz),
            ),
            Waveform::Arch {
                f_top_hz,
                f_edge_hz,
                duration_s,
                ..
            } => (
                -0.5 * duration_s,
                0.5 * duration_s,
                f_edge_hz.min(f_top_hz),
                f_edge_hz.max(f_top_hz),
            ),
        }
    }

    /// The waveform sampled at `fs_hz` on the samples nearest its support:
    /// `(first, values)` where `values[i]` is at offset
    /// `(first + i) / fs_hz − frac_s` from the reference time; `frac_s` in
    /// `[0, 1/fs)` places the reference time between samples.
    pub fn sampled(&self, fs_hz: f64, frac_s: f64) -> (i64, Vec<f64>) {
        let m = (self.half_width_s() * fs_hz).ceil() as i64 + 1;
        let vals = (-m..=m)
            .map(|i| self.value(i as f64 / fs_hz - frac_s))
            .collect();
        (-m, vals)
    }

    /// Matched-filter SNR of the unit-amplitude waveform sampled at `fs_hz`
    /// in noise of one-sided PSD `psd` (see [`matched_filter_snr`]).
    pub fn unit_snr(&self, fs_hz: f64, psd: &dyn Fn(f64) -> f64) -> f64 {
        matched_filter_snr(&self.sampled(fs_hz, 0.0).1, fs_hz, psd)
    }

    /// Amplitude that gives matched-filter SNR `snr` in noise of PSD `psd`.
    pub fn amplitude_for_snr(&self, snr: f64, fs_hz: f64, psd: &dyn Fn(f64) -> f64) -> f64 {
        snr / self.unit_snr(fs_hz, psd)
    }

    /// Add `amplitude ×` the waveform with reference time `t_ref_gps` to
    /// `data` (sample i at `t0_gps + i / fs_hz`); samples outside `data`
    /// are skipped. Returns the number of samples touched.
    pub fn add_to(
        &self,
        data: &mut [f64],
        t0_gps: f64,
        fs_hz: f64,
        t_ref_gps: f64,
        amplitude: f64,
    ) -> usize {
        let hw = self.half_width_s();
        let lo = (((t_ref_gps - hw - t0_gps) * fs_hz).floor().max(0.0)) as usize;
        let hi =
            ((((t_ref_gps + hw - t0_gps) * fs_hz).ceil() + 1.0).max(0.0) as usize).min(data.len());
        for (i, x) in data.iter_mut().enumerate().take(hi).skip(lo) {
            *x += amplitude * self.value(t0_gps + i as f64 / fs_hz - t_ref_gps);
        }
        hi.saturating_sub(lo)
    }
}

/// Matched-filter SNR of the sampled waveform `h` (sampling rate `fs_hz`)
/// in noise of one-sided PSD `psd(f)`: `ρ² = 4 Σ_k |h̃(f_k)|² Δf / S(f_k)`,
/// `h̃ = FFT(h)/fs`, `Δf = fs/N`, summed over 0 < f_k < Nyquist plus half
/// weight at the Nyquist bin (bins where the PSD is zero, negative or not
/// finite are skipped). `h` is zero-padded to at least one second and to a
/// power of two so the frequency grid is ≤ 1 Hz.
pub fn matched_filter_snr(h: &[f64], fs_hz: f64, psd: &dyn Fn(f64) -> f64) -> f64 {
    let n = h
        .len()
        .max(fs_hz.ceil() as usize)
        .next_power_of_two()
        .max(2);
    let fft = RealFftPlanner::<f64>::new().plan_fft_forward(n);
    let mut input = fft.make_input_vec();
    input[..h.len()].copy_from_slice(h);
    let mut spec = fft.make_output_vec();
    fft.process(&mut input, &mut spec)
        .expect("buffer sizes come from the plan");
    let df = fs_hz / n as f64;
    let mut rho2 = 0.0;
    for (k, c) in spec.iter().enumerate().skip(1) {
        let s = psd(k as f64 * df);
        if !(s > 0.0 && s.is_finite()) {
            continue;
        }
        let w = if k == n / 2 { 0.5 } else { 1.0 };
        rho2 += w * 4.0 * c.norm_sqr() / (fs_hz * fs_hz) * df / s;
    }
    rho2.sqrt()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Instantaneous frequency from the zero crossings of the sampled
    /// waveform around `dt`: half a period between crossings.
    fn crossing_freq(w: &Waveform, dt: f64, fs: f64) -> f64 {
        let span = 0.02;
        let n = (span * fs) as i64;
        let mut crossings = Vec::new();
        let mut prev = w.value(dt - span / 2.0);
        for i in 1..=n {
            let t = dt - span / 2.0 + i as f64 / fs;
            let v = w.value(t);
            if prev.signum() != v.signum() && prev != 0.0 {
                // Linear interpolation of the crossing.
                crossings.push(t - v / (v - prev) / fs);
            }
            prev = v;
        }
        let k = crossings.len() - 1;
        0.5 * k as f64 / (crossings[k] - crossings[0])
    }

    #[test]
    fn sweep_and_arch_follow_their_frequency_tracks() {
        let fs = 65536.0;
        let sweep = Waveform::Sweep {
            f_start_hz: 35.0,
            f_end_hz: 280.0,
            duration_s: 0.8,
            edge_frac: 0.1,
            phase_rad: 0.3,
        };
        let arch = Waveform::Arch {
            f_top_hz: 55.0,
            f_edge_hz: 12.0,
            duration_s: 1.5,
            edge_frac: 0.1,
            phase_rad: 1.0,
        };
        for w in [sweep, arch] {
            for dt in [-0.2, 0.0, 0.15] {
                let want = w.frequency_at(dt).unwrap();
                let got = crossing_freq(&w, dt, fs);
                // The frequency changes by < 3% over the 20-ms window.
                assert!(
                    (got / want - 1.0).abs() < 0.03,
                    "{w:?} at {dt}: {got} vs {want}"
                );
            }
        }
        // The chirp follows f_s (1 − τ/τ_c)^(−3/8) and ends at f_e.
        let chirp = Waveform::Chirp {
            f_start_hz: 30.0,
            f_end_hz: 300.0,
            duration_s: 2.0,
            edge_frac: 0.05,
            phase_rad: 0.2,
        };
        for dt in [-0.7, 0.0, 0.8] {
            let want = chirp.frequency_at(dt).unwrap();
            let got = crossing_freq(&chirp, dt, fs);
            assert!(
                (got / want - 1.0).abs() < 0.03,
                "chirp at {dt}: {got} vs {want}"
            );
        }
        assert!((chirp.frequency_at(-1.0).unwrap() - 30.0).abs() < 1e-9);
        assert!((chirp.frequency_at(1.0).unwrap() - 300.0).abs() < 1e-6);
        // Amplitude (f/f_e)^(2/3): the largest |h| over one cycle around dt.
        for dt in [-0.5, 0.0, 0.85] {
            let f = chirp.frequency_at(dt).unwrap();
            let got = (0..400)
                .map(|i| chirp.value(dt + (i as f64 / 400.0 - 0.5) / f).abs())
                .fold(0.0, f64::max);
            let want = (f / 300.0).powf(2.0 / 3.0);
            assert!(
                (got / want - 1.0).abs() < 0.03,
                "chirp |h| at {dt}: {got} vs {want}"
            );
        }
        // The arch peaks in the middle; the sweep rises monotonically.
        assert_eq!(arch.frequency_at(0.0), Some(55.0));
        assert!(sweep.frequency_at(0.3).unwrap() > sweep.frequency_at(-0.3).unwrap());
        assert!(arch.frequency_at(0.8).is_none());
    }

    #[test]
    fn white_noise_snr_follows_parseval() {
        // White noise of variance σ² at fs has one-sided PSD 2σ²/fs, and by
        // Parseval ρ² = 2 ∫ h² dt / S = fs ∫ h² dt / σ² (textbook).
        let fs = 4096.0;
        let sigma = 0.7;
        for w in [
            Waveform::Tone {
                f0_hz: 410.0,
                duration_s: 0.3,
                edge_frac: 0.2,
                phase_rad: 0.0,
            },
            Waveform::Sweep {
                f_start_hz: 40.0,
                f_end_hz: 200.0,
                duration_s: 0.5,
                edge_frac: 0.1,
                phase_rad: 0.0,
            },
        ] {
            let h = w.sampled(fs, 0.0).1;
            let e: f64 = h.iter().map(|x| x * x).sum::<f64>() / fs;
            let want = (fs * e / (sigma * sigma)).sqrt();
            let got = matched_filter_snr(&h, fs, &|_| 2.0 * sigma * sigma / fs);
            assert!((got / want - 1.0).abs() < 1e-3, "{got} vs {want}");
        }
    }

    #[test]
    fn sine_gaussian_energy_is_analytic() {
        // ∫ exp(−2 (2π f0 t / Q)²) sin²(..) dt ≈ Q √(π/2) / (4π f0) for Q ≳ 3
        // (Gaussian integral; the oscillating term is negligible).
        let fs = 16384.0;
        let w = Waveform::SineGaussian {
            f0_hz: 150.0,
            q: 9.0,
            phase_rad: 0.4,
        };
        let h = w.sampled(fs, 0.3 / fs).1;
        let e: f64 = h.iter().map(|x| x * x).sum::<f64>() / fs;
        let want = 9.0 * (PI / 2.0).sqrt() / (4.0 * PI * 150.0);
        assert!((e / want - 1.0).abs() < 1e-3, "{e} vs {want}");
    }

    #[test]
    fn add_to_places_the_waveform_and_scales_it() {
        let fs = 1024.0;
        let w = Waveform::Tone {
            f0_hz: 100.0,
            duration_s: 0.5,
            edge_frac: 0.1,
            phase_rad: 0.0,
        };
        let mut data = vec![0.0; 4096];
        let touched = w.add_to(&mut data, 10.0, fs, 11.0, 2.0);
        assert!(touched >= 512);
        // Nothing before 10.75 s, the tone's plateau near 11.0 s.
        assert!(data[..(0.74 * fs) as usize].iter().all(|&x| x == 0.0));
        let peak = data.iter().fold(0.0f64, |m, &x| m.max(x.abs()));
        assert!((peak - 2.0).abs() < 0.01, "{peak}");
        let amp = w.amplitude_for_snr(10.0, fs, &|_| 2.0 / fs);
        let h: Vec<f64> = w.sampled(fs, 0.0).1.iter().map(|x| x * amp).collect();
        assert!((matched_filter_snr(&h, fs, &|_| 2.0 / fs) - 10.0).abs() < 1e-9);
    }
}
