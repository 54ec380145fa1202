//! The invented world of the second scenario: the "Quarry Meadow" site
//! (prefix `QM4:`), its strain noise model, its auxiliary channels, the slow
//! drifts of noise level and ground motion, and the five glitch mechanisms
//! with their witnesses. Everything here is made up; the numbers are chosen
//! to be unlike the demo's ([`crate::demo`]) and broad in one parameter per
//! mechanism, so that the tool is judged on data it was not shaped on.
//!
//! Units: frequencies \[Hz\], times \[s\], one-sided PSDs \[unit²/Hz\]
//! (strain: 1/Hz; aux channels: arbitrary units²/Hz).

use serde::{Deserialize, Serialize};
use std::f64::consts::PI;

/// Site prefix of every channel.
pub const PREFIX: &str = "QM4:";
/// The strain (target) channel.
pub const TARGET_CHANNEL: &str = "QM4:STRAIN";
/// Sample rate of the strain channel \[Hz\].
pub const TARGET_RATE_HZ: f64 = 4096.0;
/// Default GPS time of the first sample \[GPS s\] (not the demo's).
pub const DEFAULT_START_GPS: f64 = 1_412_000_000.0;

// ---------------------------------------------------------------------------
// Strain noise
// ---------------------------------------------------------------------------

/// Level of the strain PSD: (5e-24 /√Hz)² \[1/Hz\].
pub const STRAIN_S0_PER_HZ: f64 = 2.5e-47;

/// Lines of the strain model: (centre \[Hz\], peak ASD \[1/√Hz\], Gaussian
/// width σ \[Hz\]).
pub const STRAIN_LINES: [(f64, f64, f64); 5] = [
    (41.3, 6.0e-23, 0.10),
    (55.0, 4.0e-22, 0.06),
    (165.0, 1.5e-22, 0.06),
    (331.7, 8.0e-22, 0.20),
    (777.0, 2.0e-22, 0.03),
];

/// Smooth part of the strain PSD \[1/Hz\], our own invention, unlike the
/// demo's flat bucket:
/// `S(f) = S0 [ (fw² / (f² + fc²))³ + fm / √(f² + fc²) + 1 + (f / fh)² ]`
/// with `fw = 25 Hz` (an f⁻⁶ wall), `fc = 6 Hz` (where it levels off),
/// `fm = 70 Hz` (a 1/f shoulder through the low band) and `fh = 200 Hz` (an
/// f² rise from 200 Hz); the minimum is near 100–150 Hz.
pub fn strain_psd_smooth(f_hz: f64) -> f64 {
    let (fw, fc, fm, fh) = (25.0, 6.0, 70.0, 200.0);
    let r2 = f_hz * f_hz + fc * fc;
    STRAIN_S0_PER_HZ * ((fw * fw / r2).powi(3) + fm / r2.sqrt() + 1.0 + (f_hz / fh).powi(2))
}

/// Full strain PSD \[1/Hz\]: [`strain_psd_smooth`] plus Gaussian line
/// profiles of [`STRAIN_LINES`].
pub fn strain_psd(f_hz: f64) -> f64 {
    let lines: f64 = STRAIN_LINES
        .iter()
        .filter(|&&(f0, _, s)| (f_hz - f0).abs() < 12.0 * s)
        .map(|&(f0, asd, s)| asd * asd * (-0.5 * ((f_hz - f0) / s).powi(2)).exp())
        .sum();
    strain_psd_smooth(f_hz) + lines
}

/// Noise model of an aux channel (arbitrary units):
/// `S(f) = (2 / fs) [ 1 + (fr / √(f² + fc²))^α ] + resonance`, with a
/// Lorentzian resonance `(2 / fs) g / (1 + ((f − f0) / (f0 / 2Q))²)`: white
/// of unit variance at high frequency, red below `fr`.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct AuxNoise {
    /// Corner below which the noise reddens \[Hz\].
    pub red_corner_hz: f64,
    /// Slope α of the red part.
    pub red_index: f64,
    /// Frequency below which the red part levels off \[Hz\].
    pub floor_hz: f64,
    /// Optional resonance: (centre \[Hz\], Q, peak gain over white).
    pub resonance: Option<(f64, f64, f64)>,
}

impl AuxNoise {
    /// One-sided PSD \[unit²/Hz\] at `f_hz` for sample rate `fs_hz`.
    pub fn psd(&self, f_hz: f64, fs_hz: f64) -> f64 {
        let white = 2.0 / fs_hz;
        let r = (f_hz * f_hz + self.floor_hz * self.floor_hz).sqrt();
        let red = (self.red_corner_hz / r).powf(self.red_index);
        let res = match self.resonance {
            Some((f0, q, g)) => g / (1.0 + ((f_hz - f0) / (f0 / (2.0 * q))).powi(2)),
            None => 0.0,
        };
        white * (1.0 + red + res)
    }
}

/// Noise of one channel.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum NoiseModel {
    /// [`strain_psd`].
    Strain,
    /// An [`AuxNoise`].
    Aux(AuxNoise),
}

impl NoiseModel {
    /// One-sided PSD \[unit²/Hz\] of the stationary noise (before the gain).
    pub fn psd(&self, f_hz: f64, fs_hz: f64) -> f64 {
        match self {
            NoiseModel::Strain => strain_psd(f_hz),
            NoiseModel::Aux(a) => a.psd(f_hz, fs_hz),
        }
    }
}

// ---------------------------------------------------------------------------
// Slow drifts
// ---------------------------------------------------------------------------

/// The slow drifts of one scenario (phases drawn from the seed).
///
/// - Strain noise gain (amplitude factor on the stationary noise; the local
///   PSD is `g(t)² S(f)`): `g(t) = 1 + a1 sin(2π t / 3600 s + φ1) + a2
///   sin(2π t / 1380 s + φ2)`, `a1 ∈ [0.10, 0.14]`, `a2 ∈ [0.03, 0.05]`: the
///   level drifts by ±10–19% over an hour.
/// - Ground-motion level `G(t) ∈ [0, 1]`: `clamp(0.5 + 0.35 sin(2π t /
///   4200 s + ψ1) + 0.15 sin(2π t / 1020 s + ψ2), 0, 1)`. It sets the arch
///   rate (∝ G²), the arches' top frequency, whether they come in trains,
///   and the noise level of the ground sensor (gain `0.7 + 0.6 G`).
/// - Ground-motion frequency `f_g(t) = 0.25 + 0.75 (0.5 + 0.5 sin(2π t /
///   2900 s + χ))` \[Hz\] in [0.25, 1]: arches last half its period,
///   `T = 1 / (2 f_g)` ∈ [0.5, 2] s.
///
/// `t` is the time since the scenario's start \[s\].
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Drifts {
    /// a1 of the strain gain.
    pub gain_a1: f64,
    /// a2 of the strain gain.
    pub gain_a2: f64,
    /// φ1 \[rad\].
    pub gain_phi1: f64,
    /// φ2 \[rad\].
    pub gain_phi2: f64,
    /// ψ1 \[rad\].
    pub ground_psi1: f64,
    /// ψ2 \[rad\].
    pub ground_psi2: f64,
    /// χ \[rad\].
    pub ground_chi: f64,
}

impl Drifts {
    /// Strain noise gain at `t_s` after the start.
    pub fn strain_gain(&self, t_s: f64) -> f64 {
        1.0 + self.gain_a1 * (2.0 * PI * t_s / 3600.0 + self.gain_phi1).sin()
            + self.gain_a2 * (2.0 * PI * t_s / 1380.0 + self.gain_phi2).sin()
    }

    /// Ground-motion level G in \[0, 1\] at `t_s` after the start.
    pub fn ground_level(&self, t_s: f64) -> f64 {
        (0.5 + 0.35 * (2.0 * PI * t_s / 4200.0 + self.ground_psi1).sin()
            + 0.15 * (2.0 * PI * t_s / 1020.0 + self.ground_psi2).sin())
        .clamp(0.0, 1.0)
    }

    /// Ground-motion frequency \[Hz\] in \[0.25, 1\] at `t_s` after the start.
    pub fn ground_freq_hz(&self, t_s: f64) -> f64 {
        0.25 + 0.75 * (0.5 + 0.5 * (2.0 * PI * t_s / 2900.0 + self.ground_chi).sin())
    }

    /// Noise gain of the ground sensor at `t_s` after the start.
    pub fn ground_sensor_gain(&self, t_s: f64) -> f64 {
        0.7 + 0.6 * self.ground_level(t_s)
    }
}

/// Which slow gain multiplies a channel's stationary noise.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum GainKind {
    /// Constant 1.
    Unit,
    /// [`Drifts::strain_gain`].
    Strain,
    /// [`Drifts::ground_sensor_gain`].
    Ground,
}

impl GainKind {
    /// The gain at `t_s` after the start.
    pub fn at(self, d: &Drifts, t_s: f64) -> f64 {
        match self {
            GainKind::Unit => 1.0,
            GainKind::Strain => d.strain_gain(t_s),
            GainKind::Ground => d.ground_sensor_gain(t_s),
        }
    }
}

// ---------------------------------------------------------------------------
// Mechanisms
// ---------------------------------------------------------------------------

/// The glitch mechanisms of the strain channel, and the signal-like injections.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Mechanism {
    /// Short broadband pulse: sine-Gaussian, Q 2–4, centre frequency
    /// wandering over 80–250 Hz; a quarter of them come in trains of 2–5
    /// pulses 0.15–0.45 s apart.
    Pulse,
    /// Low-frequency arch: top frequency 20–60 Hz following the ground
    /// motion, 0.5–2 s long; rate ∝ G²; trains of 3–6 arches 1–3 s apart
    /// when the ground motion is high (G ≥ 0.55).
    Arch,
    /// 410 Hz tonal burst, 0.1–0.5 s long (Q ≈ π f T ≈ 130–640).
    Tone,
    /// Upward sweep 35 Hz → 150–300 Hz over 0.2–1 s; no witness.
    Sweep,
    /// Q ≈ 10 sine-Gaussian (Q 8.5–11.5) at 40–400 Hz.
    SgQ10,
    /// Signal-like injection (a compact-binary-like chirp), listed in
    /// `injections.csv`; not a glitch.
    Injection,
}

impl Mechanism {
    /// Every mechanism, glitches first.
    pub const ALL: [Mechanism; 6] = [
        Mechanism::Pulse,
        Mechanism::Arch,
        Mechanism::Tone,
        Mechanism::Sweep,
        Mechanism::SgQ10,
        Mechanism::Injection,
    ];

    /// Name as written in `truth.csv`.
    pub fn name(self) -> &'static str {
        match self {
            Mechanism::Pulse => "pulse",
            Mechanism::Arch => "arch",
            Mechanism::Tone => "tone",
            Mechanism::Sweep => "sweep",
            Mechanism::SgQ10 => "sg_q10",
            Mechanism::Injection => "injection",
        }
    }

    /// The mechanism called `name`, if any.
    pub fn from_name(name: &str) -> Option<Mechanism> {
        Mechanism::ALL.into_iter().find(|m| m.name() == name)
    }

    /// True for the noise mechanisms (not the injections).
    pub fn is_glitch(self) -> bool {
        self != Mechanism::Injection
    }
}

/// Mean number of pulse events per hour (singles and trains).
pub const PULSE_EVENTS_PER_H: f64 = 60.0;
/// Fraction of pulse events that are trains.
pub const PULSE_TRAIN_FRACTION: f64 = 0.25;
/// Arch events per hour at full ground motion (G = 1); the rate is ∝ G².
pub const ARCH_EVENTS_PER_H_AT_G1: f64 = 60.0;
/// Ground-motion level from which arches come in trains.
pub const ARCH_TRAIN_LEVEL: f64 = 0.55;
/// Tonal bursts per hour.
pub const TONE_PER_H: f64 = 35.0;
/// Sweeps per hour.
pub const SWEEP_PER_H: f64 = 40.0;
/// Q ≈ 10 sine-Gaussians per hour.
pub const SG_Q10_PER_H: f64 = 45.0;
/// Signal-like injections per hour.
pub const INJECTIONS_PER_H: f64 = 12.0;
/// SNR range of the strain glitches: density ∝ ρ⁻³ on this range.
pub const GLITCH_SNR_RANGE: (f64, f64) = (6.0, 100.0);
/// SNR range of the injections: density ∝ ρ⁻³ on this range.
pub const INJECTION_SNR_RANGE: (f64, f64) = (10.0, 60.0);
/// Free time kept on each side of a strain event (a single glitch, a train
/// or an injection) so events never overlap \[s\]; injections keep 3 s.
pub const EVENT_PAD_S: f64 = 1.0;

// ---------------------------------------------------------------------------
// Channels
// ---------------------------------------------------------------------------

/// What an aux channel is, for scoring (written to `channels.csv`).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ChannelClass {
    /// The strain channel.
    Target,
    /// A true witness of one mechanism.
    Witness,
    /// Unrelated glitches only (some in trains).
    Unrelated,
    /// Fires often, at random.
    Frequent,
    /// Sees the signal-like injections: an unsafe veto candidate.
    Unsafe,
}

/// How a mechanism couples into a witness channel.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Coupling {
    /// The mechanism witnessed.
    pub mechanism: Mechanism,
    /// Probability that a glitch has an aux counterpart (efficiency).
    pub efficiency: f64,
    /// Lag `t_aux − t_target` \[s\] (negative: the aux glitch comes first).
    pub lag_aux_minus_target_s: f64,
    /// Aux SNR = max(floor, ρ_target × k) with k log-uniform in this range.
    pub snr_factor: (f64, f64),
    /// Lowest aux SNR.
    pub snr_floor: f64,
}

/// Unrelated glitches of a channel: sine-Gaussians, optionally in trains.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Unrelated {
    /// Events (singles or trains) per hour.
    pub events_per_h: f64,
    /// Centre frequency range \[Hz\] (log-uniform).
    pub f0_hz: (f64, f64),
    /// Q range (uniform).
    pub q: (f64, f64),
    /// Fraction of events that are trains.
    pub train_fraction: f64,
    /// Glitches per train (inclusive range).
    pub train_size: (usize, usize),
    /// Spacing of glitches in a train \[s\].
    pub train_spacing_s: (f64, f64),
}

/// One channel of the scenario.
#[derive(Debug, Clone, PartialEq)]
pub struct ChannelDef {
    /// Channel name.
    pub name: &'static str,
    /// Sample rate \[Hz\].
    pub rate_hz: f64,
    /// What it is.
    pub class: ChannelClass,
    /// Stationary noise.
    pub noise: NoiseModel,
    /// Slow gain on the noise.
    pub gain: GainKind,
    /// Coupling of a mechanism into it (witness channels).
    pub coupling: Option<Coupling>,
    /// Unrelated glitches.
    pub unrelated: Option<Unrelated>,
    /// Written as `<f4` (else `<f8`).
    pub as_f32: bool,
    /// One line for humans.
    pub blurb: &'static str,
}

impl ChannelDef {
    /// One-sided PSD of the stationary noise \[unit²/Hz\].
    pub fn psd(&self, f_hz: f64) -> f64 {
        self.noise.psd(f_hz, self.rate_hz)
    }
}

/// Aux SNR factors of the signal injections in the unsafe channel.
pub const UNSAFE_SNR_FACTOR: (f64, f64) = (2.0, 4.0);
/// Lag `t_aux − t_target` of the injections in the unsafe channel \[s\].
pub const UNSAFE_LAG_S: f64 = -0.0005;

/// The channels, target first. None of the aux channels sets `fmin`: the
/// ground sensor's witness band (1–10 Hz) lies below the tool's 16 Hz
/// default, to test per-role aux defaults.
pub fn channel_defs() -> Vec<ChannelDef> {
    let aux = |fr: f64, a: f64, floor: f64, res: Option<(f64, f64, f64)>| {
        NoiseModel::Aux(AuxNoise {
            red_corner_hz: fr,
            red_index: a,
            floor_hz: floor,
            resonance: res,
        })
    };
    let unrelated = |per_h, f0, q, tf, ts, sp| {
        Some(Unrelated {
            events_per_h: per_h,
            f0_hz: f0,
            q,
            train_fraction: tf,
            train_size: ts,
            train_spacing_s: sp,
        })
    };
    vec![
        ChannelDef {
            name: TARGET_CHANNEL,
            rate_hz: TARGET_RATE_HZ,
            class: ChannelClass::Target,
            noise: NoiseModel::Strain,
            gain: GainKind::Strain,
            coupling: None,
            unrelated: None,
            as_f32: true,
            blurb: "strain: invented PSD with an f^-6 wall, a 1/f shoulder and an f^2 rise, 5 lines; level drifting ±10-19%",
        },
        ChannelDef {
            name: "QM4:GROUND_VEL_Z",
            rate_hz: 256.0,
            class: ChannelClass::Witness,
            noise: aux(2.0, 2.0, 0.1, Some((0.2, 2.0, 30.0))),
            gain: GainKind::Ground,
            coupling: Some(Coupling {
                mechanism: Mechanism::Arch,
                efficiency: 0.75,
                lag_aux_minus_target_s: 0.06,
                snr_factor: (1.0, 2.5),
                snr_floor: 8.0,
            }),
            unrelated: unrelated(30.0, (1.0, 12.0), (3.0, 8.0), 0.0, (1, 1), (0.0, 0.0)),
            as_f32: false,
            blurb: "ground-motion sensor; witnesses arches with a 1-10 Hz burst (f_top/6), 75%, 60 ms after; level follows G",
        },
        ChannelDef {
            name: "QM4:LIGHT_MON_EXIT",
            rate_hz: 4096.0,
            class: ChannelClass::Witness,
            noise: aux(40.0, 1.0, 5.0, None),
            gain: GainKind::Unit,
            coupling: Some(Coupling {
                mechanism: Mechanism::Pulse,
                efficiency: 0.6,
                lag_aux_minus_target_s: -0.004,
                snr_factor: (0.7, 1.8),
                snr_floor: 6.0,
            }),
            unrelated: unrelated(20.0, (100.0, 900.0), (3.0, 10.0), 0.0, (1, 1), (0.0, 0.0)),
            as_f32: true,
            blurb: "light monitor; witnesses pulses (same frequency and Q), 60% of pulses, 4 ms before",
        },
        ChannelDef {
            name: "QM4:MAGNET_SHED_N",
            rate_hz: 2048.0,
            class: ChannelClass::Witness,
            noise: aux(10.0, 1.5, 2.0, Some((150.0, 30.0, 3.0))),
            gain: GainKind::Unit,
            coupling: Some(Coupling {
                mechanism: Mechanism::Tone,
                efficiency: 0.85,
                lag_aux_minus_target_s: 0.003,
                snr_factor: (0.8, 1.5),
                snr_floor: 6.0,
            }),
            unrelated: unrelated(15.0, (30.0, 480.0), (5.0, 30.0), 0.0, (1, 1), (0.0, 0.0)),
            as_f32: true,
            blurb: "magnetometer; witnesses tonal bursts (same tone and length), 85%, 3 ms after",
        },
        ChannelDef {
            name: "QM4:TILT_BENCH_A",
            rate_hz: 1024.0,
            class: ChannelClass::Witness,
            noise: aux(20.0, 2.0, 3.0, None),
            gain: GainKind::Unit,
            coupling: Some(Coupling {
                mechanism: Mechanism::SgQ10,
                efficiency: 0.65,
                lag_aux_minus_target_s: -0.025,
                snr_factor: (0.8, 1.6),
                snr_floor: 6.0,
            }),
            unrelated: unrelated(10.0, (20.0, 200.0), (4.0, 12.0), 0.0, (1, 1), (0.0, 0.0)),
            as_f32: true,
            blurb: "bench tilt sensor; witnesses Q~10 sine-Gaussians at half their frequency (same length), 65%, 25 ms before",
        },
        ChannelDef {
            name: "QM4:FAN_HALL_ACC",
            rate_hz: 512.0,
            class: ChannelClass::Unrelated,
            noise: aux(30.0, 1.0, 3.0, Some((47.0, 20.0, 5.0))),
            gain: GainKind::Unit,
            coupling: None,
            unrelated: unrelated(30.0, (20.0, 120.0), (4.0, 10.0), 1.0, (3, 6), (0.1, 0.3)),
            as_f32: true,
            blurb: "fan accelerometer; unrelated glitches, all in trains of 3-6 within ~1 s",
        },
        ChannelDef {
            name: "QM4:RELAY_RACK_B",
            rate_hz: 2048.0,
            class: ChannelClass::Frequent,
            noise: aux(5.0, 1.0, 1.0, None),
            gain: GainKind::Unit,
            coupling: None,
            unrelated: unrelated(900.0, (50.0, 480.0), (3.0, 20.0), 0.0, (1, 1), (0.0, 0.0)),
            as_f32: true,
            blurb: "relay rack monitor; fires often (~900/h) at random",
        },
        ChannelDef {
            name: "QM4:MIC_CELLAR",
            rate_hz: 256.0,
            class: ChannelClass::Unrelated,
            noise: aux(8.0, 1.5, 1.0, None),
            gain: GainKind::Unit,
            coupling: None,
            unrelated: unrelated(25.0, (17.0, 60.0), (4.0, 10.0), 0.3, (2, 2), (0.3, 0.8)),
            as_f32: false,
            blurb: "microphone; few unrelated glitches, some in pairs",
        },
        ChannelDef {
            name: "QM4:LINE_VOLT_C",
            rate_hz: 1024.0,
            class: ChannelClass::Unrelated,
            noise: aux(15.0, 1.0, 2.0, Some((55.0, 200.0, 50.0))),
            gain: GainKind::Unit,
            coupling: None,
            unrelated: unrelated(40.0, (50.0, 250.0), (10.0, 40.0), 0.0, (1, 1), (0.0, 0.0)),
            as_f32: true,
            blurb: "supply-voltage monitor; unrelated glitches in the strain glitches' band",
        },
        ChannelDef {
            name: "QM4:DRIVE_COIL_MON",
            rate_hz: 4096.0,
            class: ChannelClass::Unsafe,
            noise: aux(25.0, 1.0, 3.0, None),
            gain: GainKind::Unit,
            coupling: None,
            unrelated: unrelated(8.0, (40.0, 600.0), (4.0, 20.0), 0.0, (1, 1), (0.0, 0.0)),
            as_f32: true,
            blurb: "actuator drive monitor; records every signal-like injection (SNR x2-4): an unsafe veto candidate",
        },
    ]
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn strain_psd_has_its_shape() {
        // Wall below ~20 Hz, minimum in the bucket, rise at high frequency.
        let s = strain_psd_smooth;
        assert!(s(10.0) > 20.0 * s(40.0));
        let min_f = (20..1000)
            .map(|f| f as f64)
            .min_by(|a, b| s(*a).total_cmp(&s(*b)))
            .unwrap();
        assert!((80.0..200.0).contains(&min_f), "minimum at {min_f} Hz");
        assert!(s(1000.0) > 10.0 * s(min_f));
        // Lines sit on top of the smooth part.
        assert!(strain_psd(55.0) > 10.0 * s(55.0));
        assert_eq!(strain_psd(60.0), s(60.0));
    }

    #[test]
    fn drifts_stay_in_their_ranges() {
        let d = Drifts {
            gain_a1: 0.14,
            gain_a2: 0.05,
            gain_phi1: 0.3,
            gain_phi2: 2.0,
            ground_psi1: 1.0,
            ground_psi2: 0.5,
            ground_chi: 4.0,
        };
        for i in 0..86_400 {
            let t = i as f64;
            let g = d.strain_gain(t);
            assert!((0.8..=1.2).contains(&g));
            assert!((0.0..=1.0).contains(&d.ground_level(t)));
            let fg = d.ground_freq_hz(t);
            assert!((0.25..=1.0).contains(&fg));
        }
    }

    #[test]
    fn channel_names_are_unique_and_prefixed() {
        let defs = channel_defs();
        assert!((9..=13).contains(&defs.len()));
        for (i, d) in defs.iter().enumerate() {
            assert!(d.name.starts_with(PREFIX));
            assert!(defs[..i].iter().all(|e| e.name != d.name));
            assert!((256.0..=4096.0).contains(&d.rate_hz));
        }
    }
}
