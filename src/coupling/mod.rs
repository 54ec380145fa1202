//! Witnesses and vetoes: which auxiliary channels fire together with target
//! triggers (per family or all), with which lag and frequency relation, how
//! likely that is by chance, and veto proposals with a safety check
//! against injections.
//!
//! Inputs are plain data ([`TargetSet`], [`AuxChannel`]); [`db`] reads them
//! from the catalogue and stores results; [`output`] formats reports.
//! Definitions of every figure and the chance probability of a grid cell
//! are in [`coinc`]; the time-slide background and the trials correction
//! over the grid in [`background`]; tail probabilities in [`stats`]; the
//! round-based selection (the hierarchical method of Smith et al. 2011,
//! Class. Quantum Grav. 28, 235005) and the safety check in [`veto`]. Times
//! are GPS seconds, frequencies Hz.
//!
//! # Lag convention
//! Everywhere (tables, JSON, catalogue, report): **lag = t_aux − t_target**
//! of peak times; negative when the aux trigger comes first.
//!
//! # Trials
//! A row's `chance_p` is the probability of its own count by chance;
//! `false_alarm` adds the choice of the best of the channel's grid (time
//! slides); `false_alarm_any` the choice of the best of `channels_compared`
//! channels (Šidák 1967). A witness row is `beyond_chance` when
//! `false_alarm_any` is below the chosen level; a veto round is made only
//! while its `false_alarm` over every channel and cell is below the stop
//! level.
//!
//! # CLI wiring (for the `witnesses` and `vetoes` commands)
//! - `witnesses [--family ID] [--format table|json|csv]` →
//!   [`run_witnesses`]`(&mut conn, &WitnessParams { family, .. })`, then
//!   [`output::write_witnesses`]`(&report, format, full, &mut stdout)`
//!   (`full = false` lists the best cell per channel; `true` the whole
//!   grid). Print `report.warnings` to stderr.
//! - `vetoes [--injections CSV] [--out DIR] [--false-alarm P] [--safety-p P]
//!   [--format ...]` → read injection times, then [`run_vetoes`], then
//!   [`output::write_vetoes`], and with `--out`
//!   [`output::write_veto_segments`]`(&report, dir)`.

pub mod background;
pub mod coinc;
pub mod db;
pub mod lag;
pub mod output;
pub mod stats;
pub mod veto;

use crate::segments::SegmentList;
use anyhow::{bail, Result};
use background::{FalseAlarmBasis, GridNull};
use coinc::{ChanceBasis, Prepared, TargetIndex};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

pub use background::DEFAULT_SLIDES;
pub use db::{run_vetoes, run_witnesses, WitnessParams, WitnessReport};
pub use lag::LagSummary;
pub use output::{write_veto_segments, write_vetoes, write_witnesses, Format};
pub use veto::{ProposalState, Safety, VetoParams, VetoProposal, VetoReport, VetoRound};

/// Caution carried by every veto output (table footer, JSON `caution`
/// field, CSV column, segment-file header and metadata, report).
pub const VETO_CAUTION: &str =
    "Vetoes discard data. These are proposals only: the instrument team \
must validate each one (efficiency, deadtime, false-alarm probability and the safety check \
against injections shown here) against their own procedures before any use.";

/// Default number of thresholds per aux channel (quantiles of its SNRs).
pub const DEFAULT_THRESHOLD_STEPS: usize = 8;
/// Default number of aux triggers kept at the highest threshold.
pub const DEFAULT_MIN_KEPT: usize = 10;
/// Default paddings of the grid \[s\].
pub const DEFAULT_WINDOWS_S: [f64; 6] = [0.01, 0.05, 0.1, 0.25, 0.5, 1.0];
/// Default level of `false_alarm_any` below which a witness row is beyond
/// chance.
pub const DEFAULT_WITNESS_FALSE_ALARM: f64 = 0.01;

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
    /// Start of its extent \[GPS s\] (`t_peak` when unknown).
    pub t_start: f64,
    /// End of its extent \[GPS s\] (`t_peak` when unknown).
    pub t_end: f64,
    /// SNR.
    pub snr: f64,
    /// Peak frequency \[Hz\].
    pub f_peak: f64,
}

impl AuxTrigger {
    /// A trigger without extent (`t_start = t_end = t_peak`).
    pub fn at(t_peak: f64, snr: f64, f_peak: f64) -> Self {
        AuxTrigger {
            t_peak,
            t_start: t_peak,
            t_end: t_peak,
            snr,
            f_peak,
        }
    }
}

/// An aux channel: its triggers (sorted by time) and analysed time.
#[derive(Debug, Clone, Default)]
pub struct AuxChannel {
    /// Catalogue channel id (any number for data not from a catalogue).
    pub id: i64,
    /// Channel name (free-form; may contain ':').
    pub name: String,
    /// Triggers sorted by peak time.
    pub triggers: Vec<AuxTrigger>,
    /// Time analysed in this channel (union over its scans).
    pub analysed: SegmentList,
}

impl AuxChannel {
    /// Build from unsorted triggers (sorts them by peak time).
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

/// Coincidence figures for one (target set, aux channel, threshold,
/// padding): one grid cell. Definitions in [`coinc`] and [`background`].
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, Default)]
pub struct WitnessStat {
    /// Family id; `None` = all target triggers.
    pub family_id: Option<i64>,
    /// Aux channel id.
    pub aux_channel_id: i64,
    /// Aux channel name.
    pub aux_channel: String,
    /// Aux triggers with `snr ≥` this are used.
    pub aux_min_snr: f64,
    /// Padding added to each side of an aux trigger's extent \[s\].
    pub window_s: f64,
    /// Target triggers in the common analysed time.
    pub targets: u64,
    /// Of those, inside the window of a used aux trigger.
    pub targets_hit: u64,
    /// Aux triggers used (above the threshold, window reaching the common
    /// analysed time).
    pub aux_triggers: u64,
    /// Of those, with a target trigger inside their window.
    pub aux_hit: u64,
    /// Time inside the windows (∪, ∩ common analysed time) \[s\].
    pub covered_s: f64,
    /// Common analysed time \[s\].
    pub analysed_s: f64,
    /// `covered_s / analysed_s` (fraction).
    pub deadtime: f64,
    /// `targets_hit / targets` (fraction; 0 without targets).
    pub efficiency: f64,
    /// `aux_hit / aux_triggers` (fraction; 0 without aux triggers).
    pub aux_hit_fraction: f64,
    /// `efficiency / deadtime` (0 when the deadtime is 0).
    pub lift: f64,
    /// Targets hit expected by chance, `targets × deadtime`.
    pub targets_hit_chance: f64,
    /// Aux hit expected by chance, `aux_triggers × mean hit probability`.
    pub aux_hit_chance: f64,
    /// Clumping of the target triggers at this window (1 = independent).
    pub target_clumping: f64,
    /// Clumping of the used aux triggers at this window (1 = independent).
    pub aux_clumping: f64,
    /// Probability of this cell's count, or more, by chance.
    pub chance_p: f64,
    /// `log10(chance_p)`, kept where `chance_p` underflows to 0.
    pub chance_p_log10: f64,
    /// Which count `chance_p` is computed on ([`ChanceBasis`]).
    pub chance_basis: ChanceBasis,
    /// Time slides run for this channel (0: none).
    pub slides: u32,
    /// Fraction of slides reaching this cell's count (`None` without
    /// slides).
    pub slide_p: Option<f64>,
    /// Probability that the best cell of this channel's grid is at least
    /// this extreme by chance.
    pub false_alarm: f64,
    /// How `false_alarm` was obtained ([`FalseAlarmBasis`]).
    pub false_alarm_basis: FalseAlarmBasis,
    /// Probability that at least one of `channels_compared` unrelated
    /// channels is at least this extreme, `1 − (1 − false_alarm)^n`.
    pub false_alarm_any: f64,
    /// Aux channels compared for this target set.
    pub channels_compared: u32,
    /// `false_alarm_any` below the chosen level.
    pub beyond_chance: bool,
}

/// Aux SNR thresholds of the grid.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Thresholds {
    /// From each aux channel's own SNR distribution: `steps` thresholds
    /// keeping geometrically fewer triggers, from all of the channel's
    /// triggers down to `min_kept` (the loudest `min_kept`).
    Quantiles {
        /// Number of thresholds.
        steps: usize,
        /// Triggers kept at the highest threshold.
        min_kept: usize,
    },
    /// The same list for every channel.
    Fixed(Vec<f64>),
}

/// The (threshold × padding) grid scanned.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Grid {
    /// Aux SNR thresholds.
    pub thresholds: Thresholds,
    /// Paddings around the aux extents \[s\], ascending.
    pub windows_s: Vec<f64>,
}

impl Default for Grid {
    /// 8 quantile thresholds per channel down to its 10 loudest triggers,
    /// paddings 0.01, 0.05, 0.1, 0.25, 0.5, 1 s.
    fn default() -> Self {
        Grid {
            thresholds: Thresholds::Quantiles {
                steps: DEFAULT_THRESHOLD_STEPS,
                min_kept: DEFAULT_MIN_KEPT,
            },
            windows_s: DEFAULT_WINDOWS_S.to_vec(),
        }
    }
}

impl Grid {
    /// Check the grid: non-empty, finite, thresholds ≥ 0, windows > 0 and
    /// at most 255 of each.
    ///
    /// # Errors
    /// A one-line message naming the offending field.
    pub fn check(&self) -> Result<()> {
        match &self.thresholds {
            Thresholds::Fixed(v) => {
                if v.is_empty() {
                    bail!("thresholds must not be empty");
                }
                if let Some(x) = v.iter().find(|x| !x.is_finite() || **x < 0.0) {
                    bail!("thresholds: {x} is not a finite value ≥ 0");
                }
                if v.len() > 254 {
                    bail!("thresholds: at most 254 values");
                }
            }
            Thresholds::Quantiles { steps, min_kept } => {
                if *steps == 0 || *steps > 254 {
                    bail!("threshold steps: {steps} must lie in 1..=254");
                }
                if *min_kept == 0 {
                    bail!("min_kept must be at least 1");
                }
            }
        }
        if self.windows_s.is_empty() {
            bail!("windows_s must not be empty");
        }
        if let Some(x) = self.windows_s.iter().find(|x| !x.is_finite() || **x <= 0.0) {
            bail!("windows_s: {x} is not a finite value > 0 s");
        }
        if self.windows_s.len() > 254 {
            bail!("windows_s: at most 254 values");
        }
        Ok(())
    }
}

/// Order rows: lower false-alarm probability, then lower chance
/// probability (in logs, so that underflowed probabilities still rank),
/// higher lift, lower deadtime, then channel name, higher threshold and
/// smaller window (a total, reproducible order; "greater" is better).
pub fn better(a: &WitnessStat, b: &WitnessStat) -> std::cmp::Ordering {
    b.false_alarm
        .total_cmp(&a.false_alarm)
        .then(b.chance_p_log10.total_cmp(&a.chance_p_log10))
        .then(a.lift.total_cmp(&b.lift))
        .then(b.deadtime.total_cmp(&a.deadtime))
        .then(b.aux_channel.cmp(&a.aux_channel))
        .then(a.aux_min_snr.total_cmp(&b.aux_min_snr))
        .then(b.window_s.total_cmp(&a.window_s))
}

/// `a / b`, or 0 when `b` is 0 (nothing measured).
pub(crate) fn ratio(a: f64, b: f64) -> f64 {
    if b > 0.0 {
        a / b
    } else {
        0.0
    }
}

/// Target triggers as (peak, family), sorted by peak.
pub(crate) fn target_pairs(targets: &TargetSet) -> Vec<(f64, Option<i64>)> {
    targets
        .triggers
        .iter()
        .map(|t| (t.t_peak, t.family))
        .collect()
}

/// Every grid row of one aux channel for every set in `sets`, with the
/// channel's background (`slides` time slides; 0 = Bonferroni over the
/// grid). `base` is the target index over the target analysed time, reused
/// when the channel covers all of it; `triggers` the (peak, family) pairs it
/// was built from. `false_alarm_any`, `channels_compared` and
/// `beyond_chance` are filled in by the caller, who knows the channels.
pub(crate) fn channel_rows(
    ch: &AuxChannel,
    base: &TargetIndex,
    analysed: &SegmentList,
    triggers: &[(f64, Option<i64>)],
    sets: &[Option<i64>],
    grid: &Grid,
    slides: usize,
) -> Vec<WitnessStat> {
    let Some(p) = Prepared::new(ch, analysed, &grid.thresholds, &grid.windows_s) else {
        return Vec::new();
    };
    let own;
    let index = if p.common == base.common {
        base
    } else {
        own = TargetIndex::new(triggers, sets, &p.common);
        &own
    };
    let zero = coinc::zero_lag(&p, index);
    let need = |b: ChanceBasis| {
        zero.iter()
            .flatten()
            .any(|c| (c.basis == ChanceBasis::AuxBinomial) == (b == ChanceBasis::AuxBinomial))
    };
    let sc = (slides > 0).then(|| {
        background::run_slides(
            &p,
            index,
            slides,
            need(ChanceBasis::TargetsPoisson),
            need(ChanceBasis::AuxBinomial),
        )
    });
    let k = sc.as_ref().map_or(0, |c| c.slides);
    let n_cells = p.n_cells();
    let nw = p.windows.len();
    let mut out = Vec::with_capacity(sets.len() * n_cells);
    for (s, cells) in zero.iter().enumerate() {
        let mut best = vec![1.0f64; k];
        let mut chance = Vec::with_capacity(n_cells);
        let mut slide_ps = Vec::with_capacity(n_cells);
        for (c, cell) in cells.iter().enumerate() {
            let (log_p, slide_p) = match sc.as_ref().filter(|_| k > 0) {
                Some(sc) => {
                    let counts = sc.counts(s, c, cell.basis);
                    let frac = background::slide_fraction(&counts, cell.basis_count());
                    for (b, q) in best
                        .iter_mut()
                        .zip(background::slide_probabilities(&counts, cell.model()))
                    {
                        *b = b.min(q);
                    }
                    let log_p = if cell.basis == ChanceBasis::Slides {
                        frac.log10()
                    } else {
                        cell.analytic_log10_p()
                    };
                    (log_p, Some(frac))
                }
                None => (cell.analytic_log10_p(), None),
            };
            chance.push(log_p);
            slide_ps.push(slide_p);
        }
        let null = if k > 0 {
            GridNull::from_slides(best, n_cells)
        } else {
            GridNull::bonferroni(n_cells)
        };
        for (c, cell) in cells.iter().enumerate() {
            let chance_p = 10f64.powf(chance[c]);
            let (false_alarm, false_alarm_basis) = null.false_alarm(chance_p);
            let efficiency = ratio(cell.targets_hit as f64, cell.targets as f64);
            out.push(WitnessStat {
                family_id: sets[s],
                aux_channel_id: ch.id,
                aux_channel: ch.name.clone(),
                aux_min_snr: p.thresholds[cell.k],
                window_s: p.windows[c % nw],
                targets: cell.targets,
                targets_hit: cell.targets_hit,
                aux_triggers: cell.aux_used,
                aux_hit: cell.aux_hit,
                covered_s: cell.covered_s,
                analysed_s: p.analysed_s,
                deadtime: cell.deadtime,
                efficiency,
                aux_hit_fraction: ratio(cell.aux_hit as f64, cell.aux_used as f64),
                lift: ratio(efficiency, cell.deadtime),
                targets_hit_chance: cell.targets_hit_chance(),
                aux_hit_chance: cell.aux_hit_chance(),
                target_clumping: cell.target_clumping,
                aux_clumping: cell.aux_clumping,
                chance_p,
                chance_p_log10: chance[c],
                chance_basis: cell.basis,
                slides: k as u32,
                slide_p: slide_ps[c],
                false_alarm,
                false_alarm_basis,
                false_alarm_any: false_alarm,
                channels_compared: 1,
                beyond_chance: false,
            });
        }
    }
    out
}

/// Fill `false_alarm_any`, `channels_compared` and `beyond_chance` of
/// `rows`: for each target set, the channels with rows are the ones
/// compared, and a row is beyond chance when
/// `1 − (1 − false_alarm)^channels < level`.
pub fn mark_chance(rows: &mut [WitnessStat], level: f64) {
    let mut channels: std::collections::HashMap<Option<i64>, std::collections::HashSet<i64>> =
        std::collections::HashMap::new();
    for r in rows.iter() {
        channels
            .entry(r.family_id)
            .or_default()
            .insert(r.aux_channel_id);
    }
    for r in rows.iter_mut() {
        let n = channels[&r.family_id].len();
        r.channels_compared = n as u32;
        r.false_alarm_any = stats::sidak(r.false_alarm, n as f64);
        r.beyond_chance = r.targets_hit > 0 && r.false_alarm_any < level;
    }
}

/// The full witness table: every target set in `families` (`None` = all
/// target triggers) × aux channel × threshold × window, each row with its
/// chance probability and false-alarm probabilities (`slides` time slides
/// per channel; 0 = Bonferroni over the grid), marked beyond chance at
/// `level`. Channels run in parallel (rayon); rows come in channel order,
/// then set, threshold, window.
pub fn witness_table(
    targets: &TargetSet,
    families: &[Option<i64>],
    aux: &[AuxChannel],
    grid: &Grid,
    slides: usize,
    level: f64,
) -> Vec<WitnessStat> {
    let pairs = target_pairs(targets);
    let base = TargetIndex::new(&pairs, families, &targets.analysed);
    let mut rows: Vec<WitnessStat> = aux
        .par_iter()
        .map(|ch| channel_rows(ch, &base, &targets.analysed, &pairs, families, grid, slides))
        .flatten_iter()
        .collect();
    mark_chance(&mut rows, level);
    rows
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
            thresholds: Thresholds::Fixed(vec![f64::NAN]),
            ..Grid::default()
        };
        assert!(g.check().unwrap_err().to_string().starts_with("thresholds"));
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
        let ch = AuxChannel::new(
            1,
            "a",
            vec![AuxTrigger::at(1.0, 9.0, 1.0), AuxTrigger::at(3.0, 9.0, 1.0)],
            SegmentList::single(0.0, 10.0),
        );
        let grid = Grid {
            thresholds: Thresholds::Fixed(vec![8.0]),
            windows_s: vec![1.0],
        };
        let targets = TargetSet::new(vec![], analysed.clone());
        let rows = witness_table(&targets, &[None], &[ch], &grid, 0, 0.01);
        assert!((rows[0].covered_s - 3.2).abs() < 1e-12);
        // No targets: efficiency 0, chance probability 1, not NaN.
        assert_eq!((rows[0].efficiency, rows[0].chance_p), (0.0, 1.0));
        assert!(!rows[0].beyond_chance);
    }
}
