//! Witnesses and vetoes: which auxiliary channels fire together with target
//! triggers (per family or all), with which lag and frequency relation, and
//! hierarchical veto proposals with a safety check against injections.
//!
//! Inputs are plain data ([`TargetSet`], [`AuxChannel`]); [`db`] reads them
//! from the catalogue and stores results; [`output`] formats reports.
//! Definitions of every figure are in [`coinc`]; tail probabilities in
//! [`stats`]; the round-based selection (Smith et al. 2011, Class. Quantum
//! Grav. 28, 235005) in [`veto`]. Times are GPS seconds, frequencies Hz.
//!
//! # CLI wiring (for the `witnesses` and `vetoes` commands)
//! - `witnesses [--family ID] [--format table|json|csv]` →
//!   [`run_witnesses`]`(&mut conn, &WitnessParams { family, .. })`, then
//!   [`output::write_witnesses`]`(&report, format, full, &mut stdout)`
//!   (`full = false` lists the best threshold/window per channel; `true`
//!   the whole grid). Print `report.warnings` to stderr.
//! - `vetoes [--injections CSV] [--out DIR] [--min-significance X]
//!   [--safety-p P] [--format ...]` → read injection times, then
//!   [`run_vetoes`]`(&mut conn, &VetoParams { min_significance, safety_p, .. },
//!   injections.as_deref())`, [`output::write_vetoes`], and with `--out`
//!   [`output::write_veto_segments`]`(&report, dir)`.
//!
//! A note on trials: the best of many (channel, threshold, window)
//! combinations is chosen, so a significance of 2–3 for an unrelated channel
//! is ordinary; the stop value 5 of the veto rounds allows for that.

pub mod coinc;
pub mod db;
pub mod lag;
pub mod output;
pub mod stats;
pub mod veto;

use crate::segments::SegmentList;
use anyhow::{bail, Result};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

pub use db::{run_vetoes, run_witnesses, WitnessParams, WitnessReport};
pub use lag::LagSummary;
pub use output::{write_veto_segments, write_vetoes, write_witnesses, Format};
pub use veto::{VetoParams, VetoReport, VetoRound};

/// Caution carried by every veto output (table footer, JSON `caution`
/// field, segment-file metadata).
pub const VETO_CAUTION: &str =
    "Vetoes discard data. These are proposals only: the instrument team \
must validate each one (efficiency, deadtime, use percentage, significance and the safety check \
against injections shown here) against their own procedures before any use.";

/// Default aux SNR thresholds of the grid.
pub const DEFAULT_SNR_THRESHOLDS: [f64; 8] = [8.0, 10.0, 12.0, 15.0, 20.0, 30.0, 50.0, 100.0];
/// Default symmetric windows of the grid \[s\].
pub const DEFAULT_WINDOWS_S: [f64; 6] = [0.01, 0.05, 0.1, 0.25, 0.5, 1.0];

/// One target-channel trigger as coupling needs it.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct TargetTrigger {
    /// Peak time \[GPS s\].
    pub t_peak: f64,
    /// SNR of the loudest tile.
    pub snr: f64,
    /// Peak frequency \[Hz\].
    pub f_peak: f64,
    /// Family id, `None` when unassigned or novel.
    pub family: Option<i64>,
}

/// Target triggers (sorted by `t_peak`) and the target analysed time.
#[derive(Debug, Clone, Default)]
pub struct TargetSet {
    /// Triggers sorted by time.
    pub triggers: Vec<TargetTrigger>,
    /// Time analysed in the target channel(s).
    pub analysed: SegmentList,
}

impl TargetSet {
    /// Build from unsorted triggers (sorts them by time).
    pub fn new(mut triggers: Vec<TargetTrigger>, analysed: SegmentList) -> Self {
        triggers.sort_by(|a, b| a.t_peak.total_cmp(&b.t_peak));
        TargetSet { triggers, analysed }
    }

    /// Sorted times of the triggers in `family` (`None` = all triggers).
    pub fn times(&self, family: Option<i64>) -> Vec<f64> {
        self.triggers
            .iter()
            .filter(|t| family.is_none() || t.family == family)
            .map(|t| t.t_peak)
            .collect()
    }

    /// Distinct family ids present, ascending.
    pub fn family_ids(&self) -> Vec<i64> {
        let mut ids: Vec<i64> = self.triggers.iter().filter_map(|t| t.family).collect();
        ids.sort_unstable();
        ids.dedup();
        ids
    }
}

/// One aux-channel trigger.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct AuxTrigger {
    /// Peak time \[GPS s\].
    pub t_peak: f64,
    /// SNR.
    pub snr: f64,
    /// Peak frequency \[Hz\].
    pub f_peak: f64,
}

/// An aux channel: its triggers (sorted by time) and analysed time.
#[derive(Debug, Clone, Default)]
pub struct AuxChannel {
    /// Catalogue channel id (any number for data not from a catalogue).
    pub id: i64,
    /// Channel name (free-form; may contain ':').
    pub name: String,
    /// Triggers sorted by time.
    pub triggers: Vec<AuxTrigger>,
    /// Time analysed in this channel (union over its scans).
    pub analysed: SegmentList,
}

impl AuxChannel {
    /// Build from unsorted triggers (sorts them by time).
    pub fn new(id: i64, name: &str, mut triggers: Vec<AuxTrigger>, analysed: SegmentList) -> Self {
        triggers.sort_by(|a, b| a.t_peak.total_cmp(&b.t_peak));
        AuxChannel {
            id,
            name: name.to_string(),
            triggers,
            analysed,
        }
    }
}

/// Coincidence figures for one (target set, aux channel, threshold, window).
/// Definitions in [`coinc`].
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct WitnessStat {
    /// Family id; `None` = all target triggers.
    pub family_id: Option<i64>,
    /// Aux channel id.
    pub aux_channel_id: i64,
    /// Aux channel name.
    pub channel: String,
    /// Aux SNR threshold (aux triggers with `snr ≥` this are used).
    pub snr_threshold: f64,
    /// Half-width of the symmetric window \[s\].
    pub window_s: f64,
    /// Target triggers in the common analysed time.
    pub n_target: u64,
    /// Target triggers coincident with a used aux trigger.
    pub n_coinc: u64,
    /// Aux triggers used (above threshold, in the common analysed time).
    pub n_aux: u64,
    /// Used aux triggers with at least one coincident target trigger.
    pub n_aux_used: u64,
    /// Vetoed time (union of windows ∩ common analysed time) \[s\].
    pub vetoed_s: f64,
    /// Common analysed time \[s\].
    pub analysed_s: f64,
    /// `vetoed_s / analysed_s` (fraction).
    pub deadtime: f64,
    /// `n_coinc / n_target` (fraction; 0 when there are no targets).
    pub efficiency: f64,
    /// `100 × n_aux_used / n_aux` \[%\] (0 when no aux triggers).
    pub use_percentage: f64,
    /// Coincidences expected by chance, `n_target × deadtime`.
    pub expected: f64,
    /// `−log10 P(N ≥ n_coinc | Poisson expected)`; 0 when `n_coinc = 0`.
    pub significance: f64,
    /// `efficiency / deadtime` (0 when deadtime is 0).
    pub efficiency_over_deadtime: f64,
}

/// The (threshold × window) grid scanned.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Grid {
    /// Aux SNR thresholds.
    pub snr_thresholds: Vec<f64>,
    /// Symmetric window half-widths \[s\].
    pub windows_s: Vec<f64>,
}

impl Default for Grid {
    /// Thresholds 8, 10, 12, 15, 20, 30, 50, 100 and windows 0.01, 0.05, 0.1,
    /// 0.25, 0.5, 1 s.
    fn default() -> Self {
        Grid {
            snr_thresholds: DEFAULT_SNR_THRESHOLDS.to_vec(),
            windows_s: DEFAULT_WINDOWS_S.to_vec(),
        }
    }
}

impl Grid {
    /// Check the grid: non-empty, finite, thresholds ≥ 0, windows > 0.
    ///
    /// # Errors
    /// A one-line message naming the offending field.
    pub fn check(&self) -> Result<()> {
        if self.snr_thresholds.is_empty() || self.windows_s.is_empty() {
            bail!("snr_thresholds and windows_s must not be empty");
        }
        if let Some(x) = self
            .snr_thresholds
            .iter()
            .find(|x| !x.is_finite() || **x < 0.0)
        {
            bail!("snr_thresholds: {x} is not a finite value ≥ 0");
        }
        if let Some(x) = self.windows_s.iter().find(|x| !x.is_finite() || **x <= 0.0) {
            bail!("windows_s: {x} is not a finite value > 0 s");
        }
        Ok(())
    }
}

/// Order by significance, then efficiency/deadtime, then lower deadtime,
/// then channel name, threshold and window (a total, reproducible order).
pub fn better(a: &WitnessStat, b: &WitnessStat) -> std::cmp::Ordering {
    a.significance
        .total_cmp(&b.significance)
        .then(
            a.efficiency_over_deadtime
                .total_cmp(&b.efficiency_over_deadtime),
        )
        .then(b.deadtime.total_cmp(&a.deadtime))
        .then(b.channel.cmp(&a.channel))
        .then(a.snr_threshold.total_cmp(&b.snr_threshold))
        .then(b.window_s.total_cmp(&a.window_s))
}

/// The full witness table: every target set in `families` (`None` = all
/// target triggers) × aux channel × threshold × window. Channels run in
/// parallel (rayon); the output order is channel order, then threshold,
/// window, set.
pub fn witness_table(
    targets: &TargetSet,
    families: &[Option<i64>],
    aux: &[AuxChannel],
    grid: &Grid,
) -> Vec<WitnessStat> {
    let sets: Vec<(Option<i64>, Vec<f64>)> =
        families.iter().map(|&f| (f, targets.times(f))).collect();
    aux.par_iter()
        .map(|ch| {
            coinc::channel_grid(
                &sets,
                ch,
                &targets.analysed,
                &grid.snr_thresholds,
                &grid.windows_s,
            )
        })
        .flatten_iter()
        .collect()
}

/// The best row (by [`better`]) for each target set, in `families` order.
pub fn best_per_set<'a>(rows: &'a [WitnessStat], families: &[Option<i64>]) -> Vec<&'a WitnessStat> {
    families
        .iter()
        .filter_map(|f| {
            rows.iter()
                .filter(|r| r.family_id == *f)
                .max_by(|a, b| better(a, b))
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn grid_check_names_the_field() {
        assert!(Grid::default().check().is_ok());
        let g = Grid {
            windows_s: vec![0.1, 0.0],
            ..Grid::default()
        };
        assert!(g.check().unwrap_err().to_string().starts_with("windows_s"));
        let g = Grid {
            snr_thresholds: vec![f64::NAN],
            ..Grid::default()
        };
        assert!(g
            .check()
            .unwrap_err()
            .to_string()
            .starts_with("snr_thresholds"));
        let p = veto::VetoParams {
            safety_p: 0.0,
            ..veto::VetoParams::default()
        };
        assert!(p.check().unwrap_err().to_string().starts_with("safety_p"));
    }

    // Touching windows merge (counted once), nested analysed segments clip:
    // aux at 1 and 3 with w = 1 → [0,2] ∪ [2,4] = [0,4]; analysed [0.5,1.5)
    // ∪ [1.8,10) → 1.0 + 2.2 = 3.2 s (worked by hand).
    #[test]
    fn touching_windows_and_split_analysed_time() {
        let analysed = SegmentList::from_segments(vec![
            crate::segments::Segment::new(0.5, 1.5),
            crate::segments::Segment::new(1.8, 10.0),
        ]);
        let v = coinc::veto_segments(&[1.0, 3.0], 1.0, &analysed);
        assert!((v.total() - 3.2).abs() < 1e-12);
        assert_eq!(v.segments().len(), 2);
        let grid = coinc::channel_grid(
            &[(None, vec![])],
            &AuxChannel::new(
                1,
                "a",
                vec![
                    AuxTrigger {
                        t_peak: 1.0,
                        snr: 9.0,
                        f_peak: 1.0,
                    },
                    AuxTrigger {
                        t_peak: 3.0,
                        snr: 9.0,
                        f_peak: 1.0,
                    },
                ],
                SegmentList::single(0.0, 10.0),
            ),
            &analysed,
            &[8.0],
            &[1.0],
        );
        assert!((grid[0].vetoed_s - 3.2).abs() < 1e-12);
        // No targets: efficiency 0, significance 0 (n = 0), not NaN.
        assert_eq!((grid[0].efficiency, grid[0].significance), (0.0, 0.0));
    }
}
