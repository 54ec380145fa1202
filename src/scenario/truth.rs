//! Ground truth of the second scenario: `truth.csv` (one row per strain
//! glitch or injection), `aux_truth.csv` (one row per aux glitch) and
//! `channels.csv` (what each channel is), with readers.
//!
//! # Conventions
//! - `snr`: matched-filter SNR of the injected waveform in the channel's
//!   noise *at that time*: against the model PSD times the square of the
//!   slow gain at the reference time (`noise_gain`), i.e.
//!   `ρ = amplitude · unit_snr(model PSD) / noise_gain` (see
//!   [`crate::waveforms`] for the SNR definition), the waveform zero-padded
//!   to 16 s so the sum runs on a 1/16-Hz grid that resolves the PSD lines.
//! - Lag: `lag_aux_minus_target_s = t_aux − t_target` \[s\] (the aux
//!   glitch's reference time minus the strain glitch's); negative when the
//!   aux glitch comes first. The column name carries the sign convention.
//! - `waveform`: the serde JSON of [`Waveform`] (unit peak envelope);
//!   the injected signal is `amplitude × waveform(t − t_ref_gps)`.
//! - Extents `t_start/t_end/f_low/f_high` are [`Waveform::extent`] around
//!   the reference time.

use crate::waveforms::Waveform;
use anyhow::{bail, Context, Result};
use serde::de::DeserializeOwned;
use serde::{Deserialize, Serialize};
use std::path::Path;

/// One strain glitch or injection (a row of `truth.csv`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TruthRow {
    /// Row id (0-based, in time order).
    pub id: u32,
    /// Mechanism name ([`super::model::Mechanism::name`]).
    pub mechanism: String,
    /// Train id (shared by the glitches of one train; empty for singles).
    pub train_id: Option<u32>,
    /// Glitches in the train (1 for singles).
    pub train_size: u32,
    /// Reference time (centre of the waveform's envelope) \[GPS s\].
    pub t_ref_gps: f64,
    /// Start of the extent \[GPS s\].
    pub t_start_gps: f64,
    /// End of the extent \[GPS s\].
    pub t_end_gps: f64,
    /// Lower frequency of the extent \[Hz\].
    pub f_low_hz: f64,
    /// Upper frequency of the extent \[Hz\].
    pub f_high_hz: f64,
    /// Matched-filter SNR in the strain noise at that time.
    pub snr: f64,
    /// Slow noise gain at `t_ref_gps` (local PSD = gain² × model PSD).
    pub noise_gain: f64,
    /// Amplitude multiplying the unit-peak waveform \[strain\].
    pub amplitude: f64,
    /// Ground-motion level G at `t_ref_gps` (arches only).
    pub ground_motion: Option<f64>,
    /// Channel holding this glitch's aux counterpart (empty: none).
    pub witness_channel: Option<String>,
    /// `t_aux − t_target` \[s\] of that counterpart.
    pub lag_aux_minus_target_s: Option<f64>,
    /// Matched-filter SNR of the counterpart in its channel's noise.
    pub witness_snr: Option<f64>,
    /// Frequency ratio aux / target of the counterpart.
    pub witness_f_ratio: Option<f64>,
    /// Waveform parameters (serde JSON of [`Waveform`]).
    pub waveform: String,
}

impl TruthRow {
    /// The waveform of this row.
    ///
    /// # Errors
    /// A `waveform` cell that is not the JSON of a [`Waveform`].
    pub fn waveform(&self) -> Result<Waveform> {
        serde_json::from_str(&self.waveform)
            .with_context(|| format!("truth row {}: bad waveform JSON", self.id))
    }
}

/// What caused an aux glitch.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum AuxCause {
    /// Counterpart of a strain glitch (`truth_id`).
    Witness,
    /// Record of a signal-like injection (`truth_id`).
    Injection,
    /// Unrelated to the strain channel.
    Unrelated,
}

/// One aux glitch (a row of `aux_truth.csv`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct AuxTruthRow {
    /// Channel name.
    pub channel: String,
    /// Why it is there.
    pub cause: AuxCause,
    /// The strain row it belongs to (witness, injection).
    pub truth_id: Option<u32>,
    /// Train id among this channel's unrelated glitches.
    pub train_id: Option<u32>,
    /// Reference time \[GPS s\].
    pub t_ref_gps: f64,
    /// Start of the extent \[GPS s\].
    pub t_start_gps: f64,
    /// End of the extent \[GPS s\].
    pub t_end_gps: f64,
    /// Lower frequency of the extent \[Hz\].
    pub f_low_hz: f64,
    /// Upper frequency of the extent \[Hz\].
    pub f_high_hz: f64,
    /// Matched-filter SNR in the channel's noise at that time.
    pub snr: f64,
    /// Slow noise gain of the channel at `t_ref_gps`.
    pub noise_gain: f64,
    /// Amplitude multiplying the unit-peak waveform.
    pub amplitude: f64,
    /// Waveform parameters (serde JSON of [`Waveform`]).
    pub waveform: String,
}

/// One channel (a row of `channels.csv`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ChannelRow {
    /// Channel name.
    pub name: String,
    /// Sample rate \[Hz\].
    pub rate_hz: f64,
    /// `target` or `aux`.
    pub role: String,
    /// `target`, `witness`, `unrelated`, `frequent` or `unsafe`.
    pub class: String,
    /// Mechanism witnessed (witness channels).
    pub witnesses: Option<String>,
    /// Coupling efficiency.
    pub efficiency: Option<f64>,
    /// Coupling lag `t_aux − t_target` \[s\].
    pub lag_aux_minus_target_s: Option<f64>,
    /// Glitches written into the channel (all causes).
    pub n_glitches: usize,
    /// Element type (`<f4` or `<f8`).
    pub dtype: String,
    /// Description.
    pub description: String,
}

/// Write rows as CSV with a header.
pub(crate) fn write_csv<T: Serialize>(path: &Path, rows: &[T]) -> Result<()> {
    let mut w =
        csv::Writer::from_path(path).with_context(|| format!("creating {}", path.display()))?;
    for r in rows {
        w.serialize(r)
            .with_context(|| format!("writing {}", path.display()))?;
    }
    w.flush()
        .with_context(|| format!("writing {}", path.display()))?;
    Ok(())
}

fn read_csv<T: DeserializeOwned>(path: &Path) -> Result<Vec<T>> {
    let mut rdr =
        csv::Reader::from_path(path).with_context(|| format!("{}: cannot open", path.display()))?;
    let mut out = Vec::new();
    for rec in rdr.deserialize::<T>() {
        match rec {
            Ok(r) => out.push(r),
            Err(e) => {
                let line = e.position().map(|p| p.line()).unwrap_or(0);
                bail!("{}:{line}: bad row: {e}", path.display());
            }
        }
    }
    Ok(out)
}

/// Read `truth.csv`.
///
/// # Errors
/// Unreadable file or a bad row (`path:line: ...`).
pub fn read_truth(path: &Path) -> Result<Vec<TruthRow>> {
    read_csv(path)
}

/// Read `aux_truth.csv`.
///
/// # Errors
/// Unreadable file or a bad row (`path:line: ...`).
pub fn read_aux_truth(path: &Path) -> Result<Vec<AuxTruthRow>> {
    read_csv(path)
}

/// Read `channels.csv`.
///
/// # Errors
/// Unreadable file or a bad row (`path:line: ...`).
pub fn read_channels(path: &Path) -> Result<Vec<ChannelRow>> {
    read_csv(path)
}
