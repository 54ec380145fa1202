//! The second scenario: invented data deliberately unlike the demo
//! ([`crate::demo`]), used to judge every stage of the tool against a known
//! truth. An invented site, "Quarry Meadow" (prefix `QM4:`), with:
//!
//! - a 4096 Hz strain channel whose Gaussian noise has its own PSD shape
//!   ([`model::strain_psd`]: an f⁻⁶ wall, a 1/f shoulder, an f² rise and
//!   five lines) and a level drifting by ±10–19% over an hour
//!   ([`model::Drifts`]), NaN dropouts and a gap in `segments.txt`;
//! - five glitch mechanisms, each broad in one parameter
//!   ([`model::Mechanism`]): short broadband pulses (80–250 Hz, Q 2–4, a
//!   quarter in trains of 2–5 within a second), low-frequency arches
//!   following a slowly varying ground motion (top 20–60 Hz, 0.5–2 s, in
//!   trains 1–3 s apart when the ground moves), 410 Hz tonal bursts
//!   (0.1–0.5 s, Q ≈ 130–640), upward sweeps (35 → 150–300 Hz over
//!   0.2–1 s) and Q ≈ 10 sine-Gaussians (40–400 Hz). SNRs follow
//!   p(ρ) ∝ ρ⁻³ on [6, 100] (most near threshold, a power-law tail);
//! - nine aux channels at 256–4096 Hz ([`model::channel_defs`]): true
//!   witnesses with lags of both signs, frequency relations and partial
//!   efficiency; a 256 Hz ground sensor witnessing the arches at 1–10 Hz
//!   (below the tool's 16 Hz default fmin); channels with unrelated
//!   glitches (some in trains); one that fires often at random; and one that
//!   records the signal-like injections (an unsafe veto candidate);
//! - signal-like injections (compact-binary-like chirps, 12 per hour, SNR
//!   ρ⁻³ on [10, 60]) added to the strain and to that channel, listed in
//!   `injections.csv`.
//!
//! Files written by [`write_scenario`] into DIR: the channel bundle
//! (`bundle.toml` + one `.npy` per channel; with `days > 1`, one bundle per
//! day in `DIR/day-01`, ...), `segments.txt`, `truth.csv` (one row per
//! strain glitch and injection; see [`truth`] for the columns and
//! conventions, including the lag sign `t_aux − t_target`),
//! `aux_truth.csv`, `channels.csv`, `injections.csv`, `drift.csv` (noise
//! gain and ground motion per minute) and `README.txt`.
//!
//! [`score`] matches a catalogue's triggers, families, witnesses and vetoes
//! against the truth; [`metrics`] holds the clustering-agreement measures.
//!
//! Same seed, same bytes: every random number comes from generators seeded
//! from [`ScenarioOptions::seed`]; channels are made in parallel, each from
//! its own generator, and the noise does not depend on the glitch draws.

pub mod metrics;
pub mod model;
pub mod noise;
pub mod pipeline;
pub mod score;
pub mod truth;
pub mod write;

mod draw;

use crate::io::Role;
use anyhow::{bail, Context, Result};
use draw::{Draws, Glitch, Span};
use model::{ChannelClass, ChannelDef, Drifts, GainKind, Mechanism};
use noise::NoiseStream;
use rand::{Rng, RngCore, SeedableRng};
use rand_xoshiro::Xoshiro256Plus;
use rayon::prelude::*;
use serde::Serialize;
use std::f64::consts::PI;
use std::fmt::Write as _;
use std::path::{Path, PathBuf};
use truth::ChannelRow;
use write::{ChannelLayout, DaySpan, NpyBundleWriter, ScenarioWriter};

/// Options of [`write_scenario`].
#[derive(Debug, Clone, PartialEq)]
pub struct ScenarioOptions {
    /// Seed of every random draw (default 1); same seed, same bytes.
    pub seed: u64,
    /// Length \[h\] (default 2), 0.05 to 24, rounded to whole seconds.
    pub hours: f64,
    /// Number of consecutive bundles ("days") the span is split into
    /// (default 1), 1 to 31; each holds whole seconds.
    pub days: usize,
    /// GPS time of the first sample (default [`model::DEFAULT_START_GPS`]).
    pub start_gps: f64,
    /// Add the glitches and injections (default true). With false the
    /// channels hold the noise alone — the same noise samples — and the
    /// truth files still list what was drawn, so that `with − without`
    /// isolates the injected waveforms (for tests and noise-only rates).
    pub inject: bool,
}

impl Default for ScenarioOptions {
    fn default() -> Self {
        ScenarioOptions {
            seed: 1,
            hours: 2.0,
            days: 1,
            start_gps: model::DEFAULT_START_GPS,
            inject: true,
        }
    }
}

impl ScenarioOptions {
    /// Validate the options.
    ///
    /// # Errors
    /// A one-line message naming the bad field.
    pub fn check(&self) -> Result<()> {
        if !(self.hours.is_finite() && (0.05..=24.0).contains(&self.hours)) {
            bail!(
                "scenario: hours must be between 0.05 and 24 (got {})",
                self.hours
            );
        }
        if !(1..=31).contains(&self.days) {
            bail!(
                "scenario: days must be between 1 and 31 (got {})",
                self.days
            );
        }
        let span_s = (self.hours * 3600.0).round();
        if span_s / (self.days as f64) < 60.0 {
            bail!(
                "scenario: each of the {} days must hold at least 60 s (span {span_s} s)",
                self.days
            );
        }
        if !(self.start_gps.is_finite() && self.start_gps >= 0.0 && self.start_gps.fract() == 0.0) {
            bail!(
                "scenario: start_gps must be a whole, non-negative GPS second (got {})",
                self.start_gps
            );
        }
        Ok(())
    }

    /// The span \[s\] (whole seconds).
    pub fn span_s(&self) -> f64 {
        (self.hours * 3600.0).round()
    }

    /// The consecutive days: whole seconds each, the last takes the rest.
    pub fn day_spans(&self) -> Vec<DaySpan> {
        let span = self.span_s();
        let d = (span / self.days as f64).floor();
        (0..self.days)
            .map(|i| DaySpan {
                start_gps: self.start_gps + i as f64 * d,
                duration_s: if i + 1 == self.days {
                    span - d * (self.days - 1) as f64
                } else {
                    d
                },
            })
            .collect()
    }
}

/// One channel written.
#[derive(Debug, Clone, Serialize)]
pub struct ChannelSummary {
    /// Channel name.
    pub name: String,
    /// Sample rate \[Hz\].
    pub rate_hz: f64,
    /// `target` or `aux`.
    pub role: String,
    /// What it is (`channels.csv` class).
    pub class: ChannelClass,
    /// Samples over the whole span.
    pub n_samples: usize,
    /// Glitches added (all causes).
    pub n_glitches: usize,
}

/// Injected counts of one mechanism.
#[derive(Debug, Clone, Serialize)]
pub struct MechanismSummary {
    /// Mechanism name.
    pub name: String,
    /// Strain glitches (or injections).
    pub n_injected: usize,
    /// Of which in trains.
    pub n_in_trains: usize,
    /// Of which with an aux counterpart.
    pub n_witnessed: usize,
    /// The channel holding the counterparts.
    pub witness_channel: Option<String>,
}

/// A NaN stretch \[GPS s\], half-open.
#[derive(Debug, Clone, Serialize)]
pub struct Dropout {
    /// Channel.
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
    /// Bundle directories, one per day.
    pub bundles: Vec<PathBuf>,
    /// `segments.txt`.
    pub segments_txt: PathBuf,
    /// `truth.csv`.
    pub truth_csv: PathBuf,
    /// `aux_truth.csv`.
    pub aux_truth_csv: PathBuf,
    /// `channels.csv`.
    pub channels_csv: PathBuf,
    /// `injections.csv`.
    pub injections_csv: PathBuf,
    /// `drift.csv`.
    pub drift_csv: PathBuf,
    /// `README.txt`.
    pub readme_txt: PathBuf,
    /// Seed.
    pub seed: u64,
    /// Span start \[GPS s\].
    pub start_gps: f64,
    /// Span end \[GPS s\].
    pub end_gps: f64,
    /// The slow drifts drawn.
    pub drifts: Drifts,
    /// Channels in bundle order.
    pub channels: Vec<ChannelSummary>,
    /// Strain mechanisms, and the injections last.
    pub mechanisms: Vec<MechanismSummary>,
    /// NaN stretches.
    pub dropouts: Vec<Dropout>,
    /// The gap left out of `segments.txt` \[GPS s\].
    pub segment_gap_gps: (f64, f64),
    /// Wall-clock time \[s\].
    pub elapsed_s: f64,
}

/// Name of the injections file.
pub const INJECTIONS_CSV: &str = "injections.csv";
/// Name of the truth file.
pub const TRUTH_CSV: &str = "truth.csv";
/// Name of the aux truth file.
pub const AUX_TRUTH_CSV: &str = "aux_truth.csv";
/// Name of the channel table.
pub const CHANNELS_CSV: &str = "channels.csv";
/// Name of the segment file.
pub const SEGMENTS_TXT: &str = "segments.txt";

/// Length of the independent noise pieces \[s\] (see [`noise`]).
const NOISE_PIECE_S: f64 = 256.0;
/// Cross-fade between pieces \[s\].
const NOISE_FADE_S: f64 = 16.0;
/// Samples rendered per step \[s\].
const RENDER_CHUNK_S: f64 = 32.0;
/// Gains are evaluated every this many samples and interpolated linearly
/// (they change over ~20 minutes).
const GAIN_STEP: usize = 256;

/// Write the scenario into `dir` as `.npy` channel bundles (see the module
/// docs for the files).
///
/// # Errors
/// Bad options, or a file that cannot be written.
pub fn write_scenario(dir: &Path, opts: &ScenarioOptions) -> Result<ScenarioSummary> {
    opts.check()?;
    let writer = NpyBundleWriter {
        dir: dir.to_path_buf(),
        days: opts.day_spans(),
        description: format!(
            "glitchbook second scenario: invented site Quarry Meadow (QM4), seed {}; see README.txt",
            opts.seed
        ),
    };
    write_scenario_with(dir, opts, &writer)
}

/// Write the scenario with any sample writer (the truth and text files go
/// into `dir`).
///
/// # Errors
/// Bad options, or a file that cannot be written.
pub fn write_scenario_with(
    dir: &Path,
    opts: &ScenarioOptions,
    writer: &dyn ScenarioWriter,
) -> Result<ScenarioSummary> {
    let clock = std::time::Instant::now();
    opts.check()?;
    std::fs::create_dir_all(dir).with_context(|| format!("creating {}", dir.display()))?;
    let defs = model::channel_defs();
    let start = opts.start_gps;
    let span_s = opts.span_s();
    let end = start + span_s;

    // Three independent generators: drifts, noise seeds, event draws. The
    // noise therefore does not depend on what is injected.
    let mut rng_drift = Xoshiro256Plus::seed_from_u64(opts.seed ^ 0xD81F_7A11_0000_0001);
    let mut rng_noise = Xoshiro256Plus::seed_from_u64(opts.seed ^ 0x401C_E5EE_D000_0002);
    let mut rng = Xoshiro256Plus::seed_from_u64(opts.seed);
    let mut u = |lo: f64, hi: f64| lo + (hi - lo) * rng_drift.gen::<f64>();
    let drifts = Drifts {
        gain_a1: u(0.10, 0.14),
        gain_a2: u(0.03, 0.05),
        gain_phi1: u(0.0, 2.0 * PI),
        gain_phi2: u(0.0, 2.0 * PI),
        ground_psi1: u(0.0, 2.0 * PI),
        ground_psi2: u(0.0, 2.0 * PI),
        ground_chi: u(0.0, 2.0 * PI),
    };
    let noise_seeds: Vec<u64> = defs.iter().map(|_| rng_noise.next_u64()).collect();

    // Dropouts and the segment gap at fixed fractions of the span (lengths
    // scaled down for spans under 2 h).
    let scale = (span_s / 7200.0).min(1.0);
    let at = |frac: f64| (start + frac * span_s).round();
    let drop = |ch: &str, frac: f64, len_s: f64| Dropout {
        channel: ch.to_string(),
        start_gps: at(frac),
        end_gps: at(frac) + (len_s * scale).max(1.0).round(),
    };
    let dropouts = vec![
        drop(model::TARGET_CHANNEL, 0.18, 45.0),
        drop(model::TARGET_CHANNEL, 0.61, 120.0),
        drop(model::TARGET_CHANNEL, 0.83, 3.0),
        drop("QM4:LIGHT_MON_EXIT", 0.40, 60.0),
    ];
    let gap = (at(0.35), at(0.35) + (240.0 * scale).round().max(10.0));
    let strain_drops: Vec<(f64, f64)> = dropouts
        .iter()
        .filter(|d| d.channel == model::TARGET_CHANNEL)
        .map(|d| (d.start_gps, d.end_gps))
        .collect();

    let draws = draw::draw(
        &mut rng,
        &defs,
        &Span {
            start_gps: start,
            span_s,
            drifts: &drifts,
            strain_dropouts: &strain_drops,
        },
    )?;

    let layouts: Vec<ChannelLayout> = defs
        .iter()
        .map(|d| ChannelLayout {
            name: d.name.to_string(),
            rate_hz: d.rate_hz,
            role: if d.class == ChannelClass::Target {
                Role::Target
            } else {
                Role::Aux
            },
            as_f32: d.as_f32,
            start_gps: start,
            n_samples: (span_s * d.rate_hz).round() as usize,
        })
        .collect();

    // Render every channel (in parallel; each from its own generator).
    defs.par_iter()
        .zip(layouts.par_iter())
        .zip(noise_seeds.par_iter())
        .zip(draws.per_channel.par_iter())
        .map(|(((def, lay), &seed), glitches)| {
            let drops: Vec<(f64, f64)> = dropouts
                .iter()
                .filter(|d| d.channel == def.name)
                .map(|d| (d.start_gps, d.end_gps))
                .collect();
            let inj: &[Glitch] = if opts.inject { glitches } else { &[] };
            render_channel(def, lay, seed, &drifts, inj, &drops, writer)
                .with_context(|| format!("channel {}", def.name))
        })
        .collect::<Result<Vec<()>>>()?;
    let bundles = writer.finish(&layouts)?;

    // Text files.
    let segments_txt = dir.join(SEGMENTS_TXT);
    write_text(
        &segments_txt,
        &format!(
            "# analysis segments [GPS s]: start end (the span minus one gap)\n{start:.1} {:.1}\n{:.1} {end:.1}\n",
            gap.0, gap.1
        ),
    )?;
    let truth_csv = dir.join(TRUTH_CSV);
    truth::write_csv(&truth_csv, &draws.truth)?;
    let aux_truth_csv = dir.join(AUX_TRUTH_CSV);
    truth::write_csv(&aux_truth_csv, &draws.aux_truth)?;
    let injections_csv = dir.join(INJECTIONS_CSV);
    write_text(&injections_csv, &injections_text(&draws)?)?;
    let drift_csv = dir.join("drift.csv");
    write_text(&drift_csv, &drift_text(&drifts, start, span_s))?;

    let channels: Vec<ChannelSummary> = defs
        .iter()
        .zip(&layouts)
        .zip(&draws.per_channel)
        .map(|((d, l), g)| ChannelSummary {
            name: d.name.to_string(),
            rate_hz: d.rate_hz,
            role: if l.role == Role::Target {
                "target"
            } else {
                "aux"
            }
            .into(),
            class: d.class,
            n_samples: l.n_samples,
            n_glitches: if opts.inject { g.len() } else { 0 },
        })
        .collect();
    let channels_csv = dir.join(CHANNELS_CSV);
    let chan_rows: Vec<ChannelRow> = defs
        .iter()
        .zip(&channels)
        .map(|(d, s)| ChannelRow {
            name: d.name.to_string(),
            rate_hz: d.rate_hz,
            role: s.role.clone(),
            class: serde_json::to_value(d.class)
                .ok()
                .and_then(|v| v.as_str().map(String::from))
                .unwrap_or_default(),
            witnesses: match d.class {
                ChannelClass::Unsafe => Some(Mechanism::Injection.name().to_string()),
                _ => d.coupling.map(|k| k.mechanism.name().to_string()),
            },
            efficiency: match d.class {
                ChannelClass::Unsafe => Some(1.0),
                _ => d.coupling.map(|k| k.efficiency),
            },
            lag_aux_minus_target_s: match d.class {
                ChannelClass::Unsafe => Some(model::UNSAFE_LAG_S),
                _ => d.coupling.map(|k| k.lag_aux_minus_target_s),
            },
            n_glitches: s.n_glitches,
            dtype: if d.as_f32 { "<f4" } else { "<f8" }.into(),
            description: d.blurb.to_string(),
        })
        .collect();
    truth::write_csv(&channels_csv, &chan_rows)?;

    let mechanisms: Vec<MechanismSummary> = Mechanism::ALL
        .iter()
        .map(|m| {
            let rows = draws.truth.iter().filter(|r| r.mechanism == m.name());
            MechanismSummary {
                name: m.name().into(),
                n_injected: rows.clone().count(),
                n_in_trains: rows.clone().filter(|r| r.train_size > 1).count(),
                n_witnessed: rows.clone().filter(|r| r.witness_channel.is_some()).count(),
                witness_channel: rows.clone().find_map(|r| r.witness_channel.clone()),
            }
        })
        .collect();

    let mut summary = ScenarioSummary {
        dir: dir.to_path_buf(),
        bundles,
        segments_txt,
        truth_csv,
        aux_truth_csv,
        channels_csv,
        injections_csv,
        drift_csv,
        readme_txt: dir.join("README.txt"),
        seed: opts.seed,
        start_gps: start,
        end_gps: end,
        drifts,
        channels,
        mechanisms,
        dropouts,
        segment_gap_gps: gap,
        elapsed_s: 0.0,
    };
    write_text(&summary.readme_txt, &readme(opts, &summary, &defs))?;
    summary.elapsed_s = clock.elapsed().as_secs_f64();
    Ok(summary)
}

fn write_text(path: &Path, text: &str) -> Result<()> {
    std::fs::write(path, text).with_context(|| format!("writing {}", path.display()))
}

/// Noise × gain + glitches, NaN over dropouts, streamed into the writer.
fn render_channel(
    def: &ChannelDef,
    lay: &ChannelLayout,
    seed: u64,
    drifts: &Drifts,
    glitches: &[Glitch],
    drops: &[(f64, f64)],
    writer: &dyn ScenarioWriter,
) -> Result<()> {
    let fs = def.rate_hz;
    let psd = |f: f64| def.psd(f);
    let piece = ((NOISE_PIECE_S * fs).round() as usize).next_power_of_two();
    let fade = (NOISE_FADE_S * fs).round() as usize;
    let mut noise = NoiseStream::new(fs, &psd, Xoshiro256Plus::seed_from_u64(seed), piece, fade)?;
    let mut sink = writer.open(lay)?;
    let chunk = (RENDER_CHUNK_S * fs).round() as usize;
    let max_hw = glitches
        .iter()
        .map(|g| g.wave.half_width_s())
        .fold(0.0, f64::max);
    let mut buf = vec![0.0; chunk];
    let mut i0 = 0;
    while i0 < lay.n_samples {
        let n = chunk.min(lay.n_samples - i0);
        let out = &mut buf[..n];
        noise.fill(out)?;
        if def.gain != GainKind::Unit {
            apply_gain(out, i0, fs, |t| def.gain.at(drifts, t));
        }
        let t_a = lay.start_gps + i0 as f64 / fs;
        let t_b = lay.start_gps + (i0 + n) as f64 / fs;
        // Glitches are sorted by start: those starting before t_b, from the
        // first that can still reach t_a.
        let first =
            glitches.partition_point(|g| g.t_ref - g.wave.half_width_s() < t_a - 2.0 * max_hw);
        for g in &glitches[first..] {
            let hw = g.wave.half_width_s();
            if g.t_ref - hw > t_b {
                break;
            }
            if g.t_ref + hw >= t_a {
                g.wave.add_to(out, t_a, fs, g.t_ref, g.amplitude);
            }
        }
        for &(a, b) in drops {
            let ia = (((a - t_a) * fs).ceil().max(0.0) as usize).min(n);
            let ib = (((b - t_a) * fs).ceil().max(0.0) as usize).min(n);
            out[ia..ib].iter_mut().for_each(|x| *x = f64::NAN);
        }
        sink.write(out)?;
        i0 += n;
    }
    sink.finish()
}

/// Multiply `out` (global samples `i0..`) by `gain(t)`, t the time since
/// the start \[s\], evaluated every [`GAIN_STEP`] samples and interpolated.
fn apply_gain(out: &mut [f64], i0: usize, fs: f64, gain: impl Fn(f64) -> f64) {
    for (c, block) in out.chunks_mut(GAIN_STEP).enumerate() {
        let j = i0 + c * GAIN_STEP;
        let g0 = gain(j as f64 / fs);
        let g1 = gain((j + GAIN_STEP) as f64 / fs);
        let step = (g1 - g0) / GAIN_STEP as f64;
        for (k, x) in block.iter_mut().enumerate() {
            *x *= g0 + step * k as f64;
        }
    }
}

/// `injections.csv`: `time` (the time of the chirp's largest amplitude, at
/// the start of its end taper) and the truth row.
fn injections_text(d: &Draws) -> Result<String> {
    let mut s = String::from("time,truth_id,t_ref_gps,snr\n");
    for r in d
        .truth
        .iter()
        .filter(|r| r.mechanism == Mechanism::Injection.name())
    {
        let t = match r.waveform()? {
            crate::waveforms::Waveform::Chirp {
                duration_s,
                edge_frac,
                ..
            } => r.t_ref_gps + duration_s * (0.5 - edge_frac),
            _ => r.t_ref_gps,
        };
        let _ = writeln!(s, "{t},{},{},{}", r.id, r.t_ref_gps, r.snr);
    }
    Ok(s)
}

/// `drift.csv`: strain noise gain, ground-motion level and frequency each minute.
fn drift_text(d: &Drifts, start: f64, span_s: f64) -> String {
    let mut s = String::from("t_gps,strain_noise_gain,ground_motion,ground_freq_hz\n");
    let mut t = 0.0;
    while t <= span_s {
        let _ = writeln!(
            s,
            "{:.1},{:.6},{:.6},{:.6}",
            start + t,
            d.strain_gain(t),
            d.ground_level(t),
            d.ground_freq_hz(t)
        );
        t += 60.0;
    }
    s
}

fn readme(opts: &ScenarioOptions, s: &ScenarioSummary, defs: &[ChannelDef]) -> String {
    let mut o = String::new();
    let _ = writeln!(
        o,
        "glitchbook second scenario: the invented \"Quarry Meadow\" site (prefix QM4)\n\
         ==========================================================================\n\
         Everything here is made up for testing: names, noise, glitches and couplings.\n\
         seed {}, span {} s from GPS {} to {}, {} bundle(s){}\n",
        opts.seed,
        s.end_gps - s.start_gps,
        s.start_gps,
        s.end_gps,
        s.bundles.len(),
        if opts.inject {
            ""
        } else {
            " -- NOISE ONLY: nothing was injected; truth.csv lists what was drawn"
        }
    );
    let _ = writeln!(o, "Channels (NaN samples are dropouts)");
    for (d, c) in defs.iter().zip(&s.channels) {
        let _ = writeln!(
            o,
            "  {:<20} {:>5.0} Hz {:<6} {:>5} glitches  {}",
            d.name, d.rate_hz, c.role, c.n_glitches, d.blurb
        );
    }
    let _ = writeln!(
        o,
        "\nStrain noise: Gaussian, one-sided PSD g(t)^2 S(f),\n  \
         S(f) = S0 [ (fw^2/(f^2+fc^2))^3 + fm/sqrt(f^2+fc^2) + 1 + (f/fh)^2 ] + lines,\n  \
         S0 = (5e-24)^2 /Hz, fw = 25 Hz, fc = 6 Hz, fm = 70 Hz, fh = 200 Hz;\n  \
         lines (Hz, peak ASD /sqrt(Hz), Gaussian width Hz):"
    );
    for (f, a, w) in model::STRAIN_LINES {
        let _ = writeln!(o, "    {f} Hz, {a:e}, {w}");
    }
    let dr = &s.drifts;
    let _ = writeln!(
        o,
        "  gain g(t) = 1 + {:.3} sin(2 pi t/3600 s + {:.3}) + {:.3} sin(2 pi t/1380 s + {:.3}),\n  \
         t from the start: the noise level drifts by up to +-{:.0}% (drift.csv, per minute).\n\
         Ground motion G(t) = clamp(0.5 + 0.35 sin(2 pi t/4200 s + {:.3}) + 0.15 sin(2 pi t/1020 s + {:.3}), 0, 1);\n  \
         ground frequency f_g(t) = 0.25 + 0.75 (0.5 + 0.5 sin(2 pi t/2900 s + {:.3})) Hz.\n\
         Aux noise: (2/fs)[1 + (fr/sqrt(f^2+fc^2))^a] + resonance, arbitrary units (channels.csv).\n",
        dr.gain_a1,
        dr.gain_phi1,
        dr.gain_a2,
        dr.gain_phi2,
        100.0 * (dr.gain_a1 + dr.gain_a2),
        dr.ground_psi1,
        dr.ground_psi2,
        dr.ground_chi
    );
    let _ = writeln!(
        o,
        "Strain glitches (amplitude set so the matched-filter SNR against g(t)^2 S(f) equals the\n\
         drawn SNR; SNR density ~ rho^-3 on [6, 100]; events never overlap (1 s apart, 2 s from dropouts)):\n  \
         pulse   sine-Gaussian Q 2-4, f0 80-250 Hz (log-uniform), 60 events/h, 25% trains of 2-5 pulses 0.15-0.45 s apart\n  \
         arch    f_top 20-60 Hz = 20 + 40 G, f_edge = f_top/4, length 1/(2 f_g) = 0.5-2 s; 60 G^2 events/h;\n          \
         trains of 3-6 arches 1-3 s apart when G >= 0.55\n  \
         tone    410 Hz (+-1%), 0.1-0.5 s (log-uniform; Q ~ pi f T = 130-640), 35/h\n  \
         sweep   35 Hz -> 150-300 Hz geometric over 0.2-1 s, 40/h, no witness\n  \
         sg_q10  sine-Gaussian Q 8.5-11.5, f0 40-400 Hz (log-uniform), 45/h\n  \
         injection  signal-like chirp 30 Hz -> 250-500 Hz over 1.5-4 s, 12/h, SNR ~ rho^-3 on [10, 60]"
    );
    for m in &s.mechanisms {
        let _ = writeln!(
            o,
            "    {:<9} {:>4} injected, {:>4} in trains, {:>4} with an aux counterpart{}",
            m.name,
            m.n_injected,
            m.n_in_trains,
            m.n_witnessed,
            m.witness_channel
                .as_ref()
                .map(|c| format!(" in {c}"))
                .unwrap_or_default()
        );
    }
    let _ = writeln!(o, "\nDropouts (NaN):");
    for d in &s.dropouts {
        let _ = writeln!(o, "  {:<20} [{}, {})", d.channel, d.start_gps, d.end_gps);
    }
    let _ = writeln!(
        o,
        "\nFiles\n  \
         bundle.toml (or day-NN/bundle.toml)  the channels, one .npy each\n  \
         segments.txt    analysis segments (the span minus the gap [{}, {}))\n  \
         truth.csv       one row per strain glitch or injection: mechanism, train, reference time, extent,\n                  \
         SNR in the noise at that time, noise gain, amplitude, ground motion (arches), witness channel,\n                  \
         lag_aux_minus_target_s = t_aux - t_target (negative: aux first), witness SNR and frequency ratio,\n                  \
         waveform (JSON; strain = amplitude x waveform(t - t_ref_gps))\n  \
         aux_truth.csv   one row per aux glitch: channel, cause (witness / injection / unrelated), ...\n  \
         channels.csv    each channel's class (target, witness, unrelated, frequent, unsafe) and coupling\n  \
         injections.csv  column `time`: largest-amplitude time of each signal-like injection\n  \
         drift.csv       noise gain and ground motion per minute",
        s.segment_gap_gps.0, s.segment_gap_gps.1
    );
    o
}
