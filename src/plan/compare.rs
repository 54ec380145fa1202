//! Comparing the triggers of two catalogues channel by channel (a sharded +
//! merged run against a single-machine scan of the same data).
use crate::catalogue::TriggerRow;
use crate::catalogue::{analysed_segments, channels, open_existing, query_triggers, TriggerQuery};
use anyhow::Result;
use serde::Serialize;
use std::collections::BTreeSet;
use std::path::Path;

/// Largest analysed-time difference accepted between the two catalogues \[s\]
/// (one sample at 1 kHz; both should be equal to the nanosecond).
pub const ANALYSED_TOLERANCE_S: f64 = 1e-3;

/// One channel of a [`Comparison`].
#[derive(Debug, Clone, Default, PartialEq, Serialize)]
pub struct ChannelComparison {
    /// Channel name.
    pub channel: String,
    /// Triggers in the first catalogue.
    pub n_a: usize,
    /// Triggers in the second catalogue.
    pub n_b: usize,
    /// Pairs (k-th trigger of each, by peak time) whose peaks lie within one
    /// tile: the second peak inside the first trigger's peak tile.
    pub n_within_tile: usize,
    /// Largest peak-time difference over the pairs \[s\].
    pub max_dt_s: f64,
    /// Largest relative SNR difference over the pairs.
    pub max_rel_snr_diff: f64,
    /// Analysed time in the first catalogue \[s\].
    pub analysed_a_s: f64,
    /// Analysed time in the second catalogue \[s\].
    pub analysed_b_s: f64,
    /// Same count, every pair within one tile, same analysed time.
    pub ok: bool,
}

/// Result of [`compare_catalogues`].
#[derive(Debug, Clone, Default, PartialEq, Serialize)]
pub struct Comparison {
    /// Per channel, by name (the union of both catalogues' channels).
    pub channels: Vec<ChannelComparison>,
}

impl Comparison {
    /// Whether every channel agrees.
    pub fn ok(&self) -> bool {
        !self.channels.is_empty() && self.channels.iter().all(|c| c.ok)
    }
}

impl std::fmt::Display for Comparison {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        for c in &self.channels {
            writeln!(
                f,
                "{}: {} {} vs {} triggers, {} within one tile, max |dt| {:.3e} s, \
                 max SNR diff {:.1e}, analysed {:.3} vs {:.3} s",
                c.channel,
                if c.ok { "same" } else { "DIFFERENT" },
                c.n_a,
                c.n_b,
                c.n_within_tile,
                c.max_dt_s,
                c.max_rel_snr_diff,
                c.analysed_a_s,
                c.analysed_b_s
            )?;
        }
        let bad = self.channels.iter().filter(|c| !c.ok).count();
        if self.channels.is_empty() {
            writeln!(f, "no channels in either catalogue")
        } else if bad == 0 {
            writeln!(f, "all {} channels agree", self.channels.len())
        } else {
            writeln!(f, "{bad} of {} channels differ", self.channels.len())
        }
    }
}

/// Half of the time extent of a trigger's peak tile, `Q / (2π f)` \[s\]
/// (Chatterji et al. 2004, bisquare tile); half the extent when Q is unknown.
fn peak_tile_half_s(t: &TriggerRow) -> f64 {
    match t.q {
        Some(q) if q > 0.0 && t.f_peak > 0.0 => 2.0 * crate::tf::sigma_t(q, t.f_peak),
        _ => 0.5 * (t.t_end - t.t_start),
    }
}

/// Compare two catalogues: per channel, the trigger counts, and pairing the
/// k-th triggers by peak time, whether the second peak lies inside the first
/// trigger's peak tile; also the total analysed time.
///
/// # Errors
/// A missing or unreadable catalogue.
pub fn compare_catalogues(a: &Path, b: &Path) -> Result<Comparison> {
    let ca = open_existing(a)?;
    let cb = open_existing(b)?;
    let names: BTreeSet<String> = channels(&ca)?
        .into_iter()
        .chain(channels(&cb)?)
        .map(|c| c.name)
        .collect();
    let mut out = Comparison::default();
    for name in names {
        let q = TriggerQuery {
            channel: Some(name.clone()),
            ..TriggerQuery::default()
        };
        let get = |c: &rusqlite::Connection| -> Result<Vec<TriggerRow>> {
            // A channel missing from one catalogue has no triggers there.
            if crate::catalogue::channel_by_name(c, &name)?.is_none() {
                return Ok(Vec::new());
            }
            let mut v = query_triggers(c, &q)?;
            v.sort_by(|x, y| {
                x.t_peak
                    .total_cmp(&y.t_peak)
                    .then(x.f_peak.total_cmp(&y.f_peak))
            });
            Ok(v)
        };
        let (ta, tb) = (get(&ca)?, get(&cb)?);
        let (mut n_within, mut max_dt, mut max_snr) = (0usize, 0.0f64, 0.0f64);
        for (x, y) in ta.iter().zip(&tb) {
            let dt = (x.t_peak - y.t_peak).abs();
            if dt <= peak_tile_half_s(x) {
                n_within += 1;
            }
            max_dt = max_dt.max(dt);
            max_snr = max_snr.max((x.snr - y.snr).abs() / x.snr.abs().max(f64::MIN_POSITIVE));
        }
        let analysed_a_s = analysed_segments(&ca, &name)?.total();
        let analysed_b_s = analysed_segments(&cb, &name)?.total();
        let ok = ta.len() == tb.len()
            && n_within == ta.len()
            && (analysed_a_s - analysed_b_s).abs() <= ANALYSED_TOLERANCE_S;
        out.channels.push(ChannelComparison {
            channel: name.clone(),
            n_a: ta.len(),
            n_b: tb.len(),
            n_within_tile: n_within,
            max_dt_s: max_dt,
            max_rel_snr_diff: max_snr,
            analysed_a_s,
            analysed_b_s,
            ok,
        });
    }
    Ok(out)
}
