//! Random draws of the second scenario: when each strain event happens,
//! its waveforms and SNRs, its aux counterparts, the injections and the
//! unrelated aux glitches. One seeded generator, used in a fixed order.

use super::model::{
    ChannelClass, ChannelDef, Drifts, Mechanism, ARCH_EVENTS_PER_H_AT_G1, ARCH_TRAIN_LEVEL,
    EVENT_PAD_S, GLITCH_SNR_RANGE, INJECTIONS_PER_H, INJECTION_SNR_RANGE, PULSE_EVENTS_PER_H,
    PULSE_TRAIN_FRACTION, SG_Q10_PER_H, SWEEP_PER_H, TONE_PER_H, UNSAFE_LAG_S, UNSAFE_SNR_FACTOR,
};
use super::truth::{AuxCause, AuxTruthRow, TruthRow};
use crate::waveforms::Waveform;
use anyhow::{bail, Result};
use rand::Rng;
use rand_distr::{Distribution, Poisson};
use rand_xoshiro::Xoshiro256Plus;
use rayon::prelude::*;
use std::f64::consts::PI;

/// One waveform to add to one channel.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct Glitch {
    /// Reference time \[GPS s\].
    pub t_ref: f64,
    /// Waveform (unit peak envelope).
    pub wave: Waveform,
    /// Amplitude.
    pub amplitude: f64,
}

/// Everything drawn.
#[derive(Debug, Clone)]
pub(crate) struct Draws {
    /// Strain glitches and injections, in time order.
    pub truth: Vec<TruthRow>,
    /// Aux glitches, by channel then time.
    pub aux_truth: Vec<AuxTruthRow>,
    /// Waveforms per channel (index as in the channel list), sorted by start.
    pub per_channel: Vec<Vec<Glitch>>,
}

/// Where and when the span is.
pub(crate) struct Span<'a> {
    pub start_gps: f64,
    pub span_s: f64,
    pub drifts: &'a Drifts,
    /// NaN stretches of the strain channel \[GPS s\]: no strain event within 2 s.
    pub strain_dropouts: &'a [(f64, f64)],
}

/// A waveform waiting for its amplitude.
struct Pending {
    channel: usize,
    t_ref: f64,
    wave: Waveform,
    snr: f64,
    gain: f64,
}

/// A strain member before ids are given.
struct Member {
    mech: Mechanism,
    event: u32,
    train_size: u32,
    pending: usize,
    ground: Option<f64>,
    witness: Option<(usize, f64, f64)>, // (pending index, lag, f ratio)
}

fn uniform<R: Rng>(rng: &mut R, (lo, hi): (f64, f64)) -> f64 {
    lo + (hi - lo) * rng.gen::<f64>()
}

fn log_uniform<R: Rng>(rng: &mut R, (lo, hi): (f64, f64)) -> f64 {
    (lo.ln() + (hi.ln() - lo.ln()) * rng.gen::<f64>()).exp()
}

/// Draw from p(ρ) ∝ ρ⁻³ on [lo, hi] by inverting the CDF.
pub(crate) fn power_law_snr<R: Rng>(rng: &mut R, (lo, hi): (f64, f64)) -> f64 {
    let u: f64 = rng.gen();
    let (a, b) = (lo.powi(-2), hi.powi(-2));
    (a - u * (a - b)).powf(-0.5)
}

fn poisson<R: Rng>(rng: &mut R, mean: f64) -> usize {
    if mean <= 0.0 {
        return 0;
    }
    Poisson::new(mean)
        .map(|p| p.sample(rng) as usize)
        .unwrap_or(0)
}

/// Zero-padding of the SNR computation \[s\]: the frequency grid is then
/// 1/16 Hz, fine enough for the narrowest line of the models (σ = 0.03 Hz
/// at 777 Hz; the SNR changes by < 0.3% from a 128-s grid, see the test).
pub(crate) const SNR_GRID_S: f64 = 16.0;

/// Matched-filter SNR of the unit waveform in `psd`, on the
/// [`SNR_GRID_S`] grid ([`crate::waveforms::matched_filter_snr`]).
pub(crate) fn unit_snr_fine(w: &Waveform, fs_hz: f64, psd: &dyn Fn(f64) -> f64) -> f64 {
    let mut h = w.sampled(fs_hz, 0.0).1;
    let n = (SNR_GRID_S * fs_hz).round() as usize;
    if h.len() < n {
        h.resize(n, 0.0);
    }
    crate::waveforms::matched_filter_snr(&h, fs_hz, psd)
}

/// The waveforms of one strain event at offsets from its time.
fn event_waveforms(
    rng: &mut Xoshiro256Plus,
    mech: Mechanism,
    ground: f64,
    ground_freq_hz: f64,
) -> Vec<(f64, Waveform)> {
    let phase = |rng: &mut Xoshiro256Plus| uniform(rng, (0.0, 2.0 * PI));
    match mech {
        Mechanism::Pulse => {
            let n = if rng.gen_bool(PULSE_TRAIN_FRACTION) {
                rng.gen_range(2..=5)
            } else {
                1
            };
            let base = log_uniform(rng, (80.0, 250.0));
            let mut t = 0.0;
            (0..n)
                .map(|i| {
                    if i > 0 {
                        t += uniform(rng, (0.15, 0.45));
                    }
                    let f0 = (base * uniform(rng, (0.92, 1.08))).clamp(80.0, 250.0);
                    let w = Waveform::SineGaussian {
                        f0_hz: f0,
                        q: uniform(rng, (2.0, 4.0)),
                        phase_rad: phase(rng),
                    };
                    (t, w)
                })
                .collect()
        }
        Mechanism::Arch => {
            let n = if ground >= ARCH_TRAIN_LEVEL {
                rng.gen_range(3..=6)
            } else {
                1
            };
            let t_half = 0.5 / ground_freq_hz;
            let mut t = 0.0;
            (0..n)
                .map(|i| {
                    let dur = (t_half * uniform(rng, (0.95, 1.05))).clamp(0.5, 2.0);
                    if i > 0 {
                        t += (dur * uniform(rng, (1.0, 1.5))).clamp(1.0, 3.0);
                    }
                    let f_top =
                        (20.0 + 40.0 * ground * uniform(rng, (0.85, 1.15))).clamp(20.0, 60.0);
                    let w = Waveform::Arch {
                        f_top_hz: f_top,
                        f_edge_hz: 0.25 * f_top,
                        duration_s: dur,
                        edge_frac: 0.15,
                        phase_rad: phase(rng),
                    };
                    (t, w)
                })
                .collect()
        }
        Mechanism::Tone => vec![(
            0.0,
            Waveform::Tone {
                f0_hz: 410.0 * uniform(rng, (0.99, 1.01)),
                duration_s: log_uniform(rng, (0.1, 0.5)),
                edge_frac: 0.25,
                phase_rad: phase(rng),
            },
        )],
        Mechanism::Sweep => vec![(
            0.0,
            Waveform::Sweep {
                f_start_hz: 35.0 * uniform(rng, (0.95, 1.05)),
                f_end_hz: uniform(rng, (150.0, 300.0)),
                duration_s: log_uniform(rng, (0.2, 1.0)),
                edge_frac: 0.1,
                phase_rad: phase(rng),
            },
        )],
        Mechanism::SgQ10 => vec![(
            0.0,
            Waveform::SineGaussian {
                f0_hz: log_uniform(rng, (40.0, 400.0)),
                q: uniform(rng, (8.5, 11.5)),
                phase_rad: phase(rng),
            },
        )],
        Mechanism::Injection => vec![(
            0.0,
            Waveform::Chirp {
                f_start_hz: 30.0,
                f_end_hz: uniform(rng, (250.0, 500.0)),
                duration_s: uniform(rng, (1.5, 4.0)),
                edge_frac: 0.05,
                phase_rad: phase(rng),
            },
        )],
    }
}

/// The aux counterpart of a strain waveform in its witness channel, and
/// the frequency ratio aux / target.
fn counterpart(rng: &mut Xoshiro256Plus, mech: Mechanism, w: &Waveform) -> (Waveform, f64) {
    let phase = uniform(rng, (0.0, 2.0 * PI));
    match (mech, *w) {
        // Same frequency and Q.
        (Mechanism::Pulse, Waveform::SineGaussian { f0_hz, q, .. }) => (
            Waveform::SineGaussian {
                f0_hz,
                q,
                phase_rad: phase,
            },
            1.0,
        ),
        // Half the frequency, same length (Q halves).
        (Mechanism::SgQ10, Waveform::SineGaussian { f0_hz, q, .. }) => (
            Waveform::SineGaussian {
                f0_hz: 0.5 * f0_hz,
                q: 0.5 * q,
                phase_rad: phase,
            },
            0.5,
        ),
        // Same tone and length.
        (Mechanism::Tone, Waveform::Tone { .. }) => {
            let mut a = *w;
            if let Waveform::Tone { phase_rad, .. } = &mut a {
                *phase_rad = phase;
            }
            (a, 1.0)
        }
        // A ground burst at f_top / 6 (1–10 Hz) lasting about as long.
        (
            Mechanism::Arch,
            Waveform::Arch {
                f_top_hz,
                duration_s,
                ..
            },
        ) => {
            let f0 = f_top_hz / 6.0;
            // σ_t = Q / (2π f0) ≈ a third of the arch.
            let q = (2.0 * PI * f0 * duration_s / 3.0).clamp(2.5, 8.0);
            (
                Waveform::SineGaussian {
                    f0_hz: f0,
                    q,
                    phase_rad: phase,
                },
                1.0 / 6.0,
            )
        }
        // Injections are recorded as they are.
        (_, w) => (w, 1.0),
    }
}

/// Draw every event of the scenario.
pub(crate) fn draw(rng: &mut Xoshiro256Plus, defs: &[ChannelDef], span: &Span) -> Result<Draws> {
    let (t0, len) = (span.start_gps, span.span_s);
    let hours = len / 3600.0;
    let edge = 10.0_f64.min(len / 20.0);
    let d = span.drifts;
    let mut pend: Vec<Pending> = Vec::new();
    let mut members: Vec<Member> = Vec::new();
    // Occupied [lo, hi] of placed strain events \[GPS s\].
    let mut busy: Vec<(f64, f64)> = Vec::new();
    let mut n_events: u32 = 0;

    let unsafe_ch = defs.iter().position(|c| c.class == ChannelClass::Unsafe);
    let witness_of = |m: Mechanism| {
        defs.iter()
            .position(|c| c.coupling.is_some_and(|k| k.mechanism == m))
    };

    // Mean of G² over the span (arch rate ∝ G²), on a 10-s grid.
    let n_grid = (len / 10.0).ceil().max(1.0) as usize;
    let g2_mean = (0..n_grid)
        .map(|i| {
            d.ground_level((i as f64 + 0.5) * len / n_grid as f64)
                .powi(2)
        })
        .sum::<f64>()
        / n_grid as f64;

    let plan: [(Mechanism, f64); 6] = [
        (Mechanism::Injection, INJECTIONS_PER_H * hours),
        (Mechanism::Arch, ARCH_EVENTS_PER_H_AT_G1 * g2_mean * hours),
        (Mechanism::Pulse, PULSE_EVENTS_PER_H * hours),
        (Mechanism::Tone, TONE_PER_H * hours),
        (Mechanism::Sweep, SWEEP_PER_H * hours),
        (Mechanism::SgQ10, SG_Q10_PER_H * hours),
    ];
    for (mech, mean) in plan {
        let count = poisson(rng, mean);
        let pad = if mech == Mechanism::Injection {
            3.0
        } else {
            EVENT_PAD_S
        };
        for _ in 0..count {
            let mut tries = 0;
            let (t, waves) = loop {
                tries += 1;
                if tries > 20_000 {
                    bail!(
                        "scenario: no room for another {} event in {len} s (placed {})",
                        mech.name(),
                        busy.len()
                    );
                }
                let t = uniform(rng, (t0 + edge, t0 + len - edge));
                let g = d.ground_level(t - t0);
                if mech == Mechanism::Arch && rng.gen::<f64>() >= g * g {
                    continue;
                }
                let waves = event_waveforms(rng, mech, g, d.ground_freq_hz(t - t0));
                let lo = waves
                    .iter()
                    .map(|(o, w)| t + o + w.extent().0)
                    .fold(f64::INFINITY, f64::min);
                let hi = waves
                    .iter()
                    .map(|(o, w)| t + o + w.extent().1)
                    .fold(f64::NEG_INFINITY, f64::max);
                let inside = lo - pad >= t0 && hi + pad <= t0 + len;
                let free = busy.iter().all(|&(a, b)| hi + pad < a || lo - pad > b);
                let clear = span
                    .strain_dropouts
                    .iter()
                    .all(|&(a, b)| hi < a - 2.0 || lo > b + 2.0);
                if inside && free && clear {
                    busy.push((lo, hi));
                    break (t, waves);
                }
            };
            let ev = n_events;
            n_events += 1;
            let n = waves.len() as u32;
            for (off, w) in waves {
                let t_ref = t + off;
                let snr = if mech == Mechanism::Injection {
                    power_law_snr(rng, INJECTION_SNR_RANGE)
                } else {
                    power_law_snr(rng, GLITCH_SNR_RANGE)
                };
                pend.push(Pending {
                    channel: 0,
                    t_ref,
                    wave: w,
                    snr,
                    gain: defs[0].gain.at(d, t_ref - t0),
                });
                let own = pend.len() - 1;
                let witness = if mech == Mechanism::Injection {
                    unsafe_ch.map(|c| {
                        let k = log_uniform(rng, UNSAFE_SNR_FACTOR);
                        let t_aux = t_ref + UNSAFE_LAG_S;
                        pend.push(Pending {
                            channel: c,
                            t_ref: t_aux,
                            wave: w,
                            snr: snr * k,
                            gain: defs[c].gain.at(d, t_aux - t0),
                        });
                        (pend.len() - 1, UNSAFE_LAG_S, 1.0)
                    })
                } else {
                    match witness_of(mech) {
                        Some(c) => {
                            let k = defs[c].coupling.expect("witness channel");
                            let seen = rng.gen_bool(k.efficiency);
                            let factor = log_uniform(rng, k.snr_factor);
                            let (aw, ratio) = counterpart(rng, mech, &w);
                            seen.then(|| {
                                let t_aux = t_ref + k.lag_aux_minus_target_s;
                                pend.push(Pending {
                                    channel: c,
                                    t_ref: t_aux,
                                    wave: aw,
                                    snr: (snr * factor).max(k.snr_floor),
                                    gain: defs[c].gain.at(d, t_aux - t0),
                                });
                                (pend.len() - 1, k.lag_aux_minus_target_s, ratio)
                            })
                        }
                        None => None,
                    }
                };
                members.push(Member {
                    mech,
                    event: ev,
                    train_size: n,
                    pending: own,
                    ground: (mech == Mechanism::Arch).then(|| d.ground_level(t_ref - t0)),
                    witness,
                });
            }
        }
    }

    // Unrelated aux glitches, channel by channel.
    let mut unrelated: Vec<(usize, Option<u32>)> = Vec::new(); // (pending, train id)
    for (c, def) in defs.iter().enumerate() {
        let Some(u) = def.unrelated else { continue };
        let mut train = 0u32;
        for _ in 0..poisson(rng, u.events_per_h * hours) {
            let t = uniform(rng, (t0 + 2.0, t0 + len - 4.0));
            let n = if u.train_fraction > 0.0 && rng.gen_bool(u.train_fraction.min(1.0)) {
                rng.gen_range(u.train_size.0..=u.train_size.1)
            } else {
                1
            };
            let id = (n > 1).then(|| {
                train += 1;
                train - 1
            });
            let mut off = 0.0;
            for i in 0..n {
                if i > 0 {
                    off += uniform(rng, u.train_spacing_s);
                }
                let w = Waveform::SineGaussian {
                    f0_hz: log_uniform(rng, u.f0_hz),
                    q: uniform(rng, u.q),
                    phase_rad: uniform(rng, (0.0, 2.0 * PI)),
                };
                let t_ref = t + off;
                pend.push(Pending {
                    channel: c,
                    t_ref,
                    wave: w,
                    snr: power_law_snr(rng, GLITCH_SNR_RANGE),
                    gain: def.gain.at(d, t_ref - t0),
                });
                unrelated.push((pend.len() - 1, id));
            }
        }
    }

    // Amplitudes: ρ × gain / (SNR of the unit waveform in the model PSD).
    let amps: Vec<f64> = pend
        .par_iter()
        .map(|p| {
            let def = &defs[p.channel];
            p.snr * p.gain / unit_snr_fine(&p.wave, def.rate_hz, &|f| def.psd(f))
        })
        .collect();

    // Strain rows in time order; train ids renumbered in time order.
    members.sort_by(|a, b| pend[a.pending].t_ref.total_cmp(&pend[b.pending].t_ref));
    let mut train_ids: std::collections::HashMap<u32, u32> = Default::default();
    let mut truth = Vec::with_capacity(members.len());
    let mut aux_truth = Vec::new();
    let aux_row = |i: usize, cause, truth_id, train_id| {
        let p = &pend[i];
        let (a, b, fl, fh) = p.wave.extent();
        AuxTruthRow {
            channel: defs[p.channel].name.to_string(),
            cause,
            truth_id,
            train_id,
            t_ref_gps: p.t_ref,
            t_start_gps: p.t_ref + a,
            t_end_gps: p.t_ref + b,
            f_low_hz: fl,
            f_high_hz: fh,
            snr: p.snr,
            noise_gain: p.gain,
            amplitude: amps[i],
            waveform: serde_json::to_string(&p.wave).expect("plain data"),
        }
    };
    for (id, m) in members.iter().enumerate() {
        let p = &pend[m.pending];
        let train_id = (m.train_size > 1).then(|| {
            let next = train_ids.len() as u32;
            *train_ids.entry(m.event).or_insert(next)
        });
        let (a, b, fl, fh) = p.wave.extent();
        let mut row = TruthRow {
            id: id as u32,
            mechanism: m.mech.name().into(),
            train_id,
            train_size: m.train_size,
            t_ref_gps: p.t_ref,
            t_start_gps: p.t_ref + a,
            t_end_gps: p.t_ref + b,
            f_low_hz: fl,
            f_high_hz: fh,
            snr: p.snr,
            noise_gain: p.gain,
            amplitude: amps[m.pending],
            ground_motion: m.ground,
            witness_channel: None,
            lag_aux_minus_target_s: None,
            witness_snr: None,
            witness_f_ratio: None,
            waveform: serde_json::to_string(&p.wave).expect("plain data"),
        };
        if let Some((wi, lag, ratio)) = m.witness {
            row.witness_channel = Some(defs[pend[wi].channel].name.to_string());
            row.lag_aux_minus_target_s = Some(lag);
            row.witness_snr = Some(pend[wi].snr);
            row.witness_f_ratio = Some(ratio);
            let cause = if m.mech == Mechanism::Injection {
                AuxCause::Injection
            } else {
                AuxCause::Witness
            };
            aux_truth.push(aux_row(wi, cause, Some(id as u32), None));
        }
        truth.push(row);
    }
    for &(i, train) in &unrelated {
        aux_truth.push(aux_row(i, AuxCause::Unrelated, None, train));
    }
    aux_truth.sort_by(|a, b| {
        let ca = defs.iter().position(|d| d.name == a.channel);
        let cb = defs.iter().position(|d| d.name == b.channel);
        ca.cmp(&cb).then(a.t_ref_gps.total_cmp(&b.t_ref_gps))
    });

    let mut per_channel: Vec<Vec<Glitch>> = vec![Vec::new(); defs.len()];
    for (p, &a) in pend.iter().zip(&amps) {
        per_channel[p.channel].push(Glitch {
            t_ref: p.t_ref,
            wave: p.wave,
            amplitude: a,
        });
    }
    for list in &mut per_channel {
        list.sort_by(|a, b| {
            (a.t_ref - a.wave.half_width_s()).total_cmp(&(b.t_ref - b.wave.half_width_s()))
        });
    }
    Ok(Draws {
        truth,
        aux_truth,
        per_channel,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::scenario::model::strain_psd;

    #[test]
    fn snr_grid_is_fine_enough_for_the_lines() {
        // Waveforms sitting on the strain lines: the 16-s grid agrees with
        // a 128-s grid (close to the continuous integral) within 0.3%.
        let fs = 4096.0;
        for w in [
            Waveform::SineGaussian {
                f0_hz: 55.0,
                q: 9.0,
                phase_rad: 0.1,
            },
            Waveform::SineGaussian {
                f0_hz: 777.0,
                q: 60.0,
                phase_rad: 0.1,
            },
            Waveform::Tone {
                f0_hz: 331.7,
                duration_s: 0.5,
                edge_frac: 0.25,
                phase_rad: 0.0,
            },
            Waveform::Arch {
                f_top_hz: 50.0,
                f_edge_hz: 12.5,
                duration_s: 2.0,
                edge_frac: 0.15,
                phase_rad: 0.0,
            },
        ] {
            let fine = unit_snr_fine(&w, fs, &strain_psd);
            let mut h = w.sampled(fs, 0.0).1;
            h.resize(128 * 4096, 0.0);
            let finer = crate::waveforms::matched_filter_snr(&h, fs, &strain_psd);
            assert!(
                (fine / finer - 1.0).abs() < 3e-3,
                "{w:?}: {fine} vs {finer}"
            );
        }
    }
}
