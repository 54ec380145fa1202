//! Veto rounds (the hierarchical method of Smith et al. 2011, Class.
//! Quantum Grav. 28, 235005), their safety check against injections, and
//! one consolidated proposal per aux channel.
//!
//! # Rounds
//! Each round computes the whole (aux channel × threshold × padding) grid
//! on the target triggers still remaining and the time still analysed. The
//! channels are ranked by their best cell's chance probability; the
//! background of the best [`VetoParams::candidates`] is measured with time
//! slides ([`super::background`]) and the one with the lowest false-alarm
//! probability is the round's pick. Its false-alarm probability over every
//! channel compared, `1 − (1 − false_alarm)^channels` (Šidák 1967), must be
//! below [`VetoParams::false_alarm`] for the round to count; otherwise the
//! rounds stop. A counted round that is not unsafe removes the target
//! triggers it vetoes and its veto segments from the analysed time.
//!
//! # Safety
//! With injections (times of simulated signals added to the data), the
//! injections inside the round's common analysed time (N) that fall in its
//! veto segments (k) are compared with chance: the decision uses the exact
//! binomial `P(X ≥ k | Binomial(N, deadtime))` (each injection lands in the
//! vetoed time with probability `deadtime`); the Poisson
//! `P(X ≥ k | Poisson(N × deadtime))` is shown beside it for reference (it
//! is lenient at large deadtime). Below [`VetoParams::safety_p`] (default
//! 1e-5, common practice) a round is unsafe: nothing is removed for it and
//! its channel takes no part in later rounds. Without injections a round is
//! `unchecked`, never safe; so is one whose injections are too few to show
//! it unsafe at its deadtime (even all of them vetoed, `deadtime^N`, would
//! not be below the limit).
//!
//! # Proposals
//! The rounds of one aux channel (over all target triggers and every
//! family) are consolidated into one proposal: the union of their veto
//! segments, its combined deadtime and efficiency over all target triggers,
//! and a safety check of the union. A proposal is `proposed` only when that
//! check passed, `unchecked` without injections, `unsafe` otherwise.

use super::background::FalseAlarmBasis;
use super::coinc::{hit_mask, ChanceBasis, Prepared, TargetIndex};
use super::stats::{binomial_ln_sf, poisson_ln_sf, sidak};
use super::{
    better, channel_rows, AuxChannel, Grid, TargetSet, Thresholds, WitnessStat, DEFAULT_SLIDES,
    VETO_CAUTION,
};
use crate::segments::SegmentList;
use anyhow::{bail, Result};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

/// Default stop level of the rounds: a round counts while the false-alarm
/// probability of its pick over every channel and cell is below this.
pub const DEFAULT_ROUND_FALSE_ALARM: f64 = 1e-3;

/// Parameters of the veto rounds.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct VetoParams {
    /// Threshold × padding grid (default [`Grid::default`]).
    pub grid: Grid,
    /// Time slides per candidate channel (default [`DEFAULT_SLIDES`]; 0 =
    /// Bonferroni over the grid).
    pub slides: usize,
    /// Stop when the round's false-alarm probability over every channel
    /// and cell is above this (default 1e-3).
    pub false_alarm: f64,
    /// Safety probability below which a veto is unsafe (default 1e-5,
    /// common practice).
    pub safety_p: f64,
    /// Also run the rounds separately for each family (mode `family`).
    pub per_family: bool,
    /// Upper bound on rounds per mode/family (default 100).
    pub max_rounds: usize,
    /// Only target triggers with `snr ≥` this (default: all).
    pub target_min_snr: Option<f64>,
    /// Channels per round whose background is measured (the best by chance
    /// probability; default 3).
    pub candidates: usize,
}

impl Default for VetoParams {
    fn default() -> Self {
        VetoParams {
            grid: Grid::default(),
            slides: DEFAULT_SLIDES,
            false_alarm: DEFAULT_ROUND_FALSE_ALARM,
            safety_p: 1e-5,
            per_family: true,
            max_rounds: 100,
            target_min_snr: None,
            candidates: 3,
        }
    }
}

impl VetoParams {
    /// Validate the parameters.
    ///
    /// # Errors
    /// A one-line message naming the offending field.
    pub fn check(&self) -> Result<()> {
        self.grid.check()?;
        if !(self.false_alarm > 0.0 && self.false_alarm < 1.0) {
            bail!("false_alarm: {} must lie in (0, 1)", self.false_alarm);
        }
        if !(self.safety_p > 0.0 && self.safety_p < 1.0) {
            bail!("safety_p: {} must lie in (0, 1)", self.safety_p);
        }
        if self.max_rounds == 0 {
            bail!("max_rounds must be at least 1");
        }
        if self.candidates == 0 {
            bail!("candidates must be at least 1");
        }
        Ok(())
    }
}

/// Outcome of a safety check.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "snake_case")]
pub enum Safety {
    /// Checked against injections and passed.
    Safe,
    /// Checked and failed: vetoes more injections than chance allows.
    Unsafe,
    /// No injections given: not checked (never shown as safe).
    #[default]
    Unchecked,
}

impl Safety {
    /// The name used in tables, JSON, CSV and the catalogue.
    pub fn as_str(self) -> &'static str {
        match self {
            Safety::Safe => "safe",
            Safety::Unsafe => "unsafe",
            Safety::Unchecked => "unchecked",
        }
    }
}

/// The safety figures of one veto against injections.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct SafetyCheck {
    /// Injections inside the analysed time (None without injections).
    pub injections: Option<u64>,
    /// Of those, inside the veto segments.
    pub injections_vetoed: Option<u64>,
    /// Expected by chance, `injections × deadtime`.
    pub injections_chance: Option<f64>,
    /// `P(X ≥ vetoed | Binomial(injections, deadtime))`: decides.
    pub binomial_p: Option<f64>,
    /// `P(X ≥ vetoed | Poisson(injections × deadtime))`: for reference.
    pub poisson_p: Option<f64>,
    /// The outcome.
    pub safety: Safety,
}

/// Check a veto of `deadtime` that holds `vetoed` of `injections`
/// injections: unsafe when the exact binomial tail is below `limit`.
/// `None` injections: unchecked. Also unchecked when the injections could
/// not show the veto unsafe whatever it held: with N injections the
/// smallest tail is `P(X ≥ N) = deadtime^N` (every one vetoed), and when
/// that is not below `limit` (say 2 injections at deadtime 0.005: 2.5e-5)
/// passing says nothing — too few injections for this deadtime.
pub fn safety_check(injections: Option<(u64, u64)>, deadtime: f64, limit: f64) -> SafetyCheck {
    let Some((n, k)) = injections else {
        return SafetyCheck::default();
    };
    let binomial_p = binomial_ln_sf(k, n, deadtime).exp();
    let mu = n as f64 * deadtime;
    let can_fail = binomial_ln_sf(n, n, deadtime) < limit.ln();
    SafetyCheck {
        injections: Some(n),
        injections_vetoed: Some(k),
        injections_chance: Some(mu),
        binomial_p: Some(binomial_p),
        poisson_p: Some(poisson_ln_sf(k, mu).exp()),
        safety: if binomial_p < limit {
            Safety::Unsafe
        } else if can_fail {
            Safety::Safe
        } else {
            Safety::Unchecked
        },
    }
}

/// One veto round.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct VetoRound {
    /// `all` (all target triggers) or `family`.
    pub mode: String,
    /// Family id in mode `family`, else `None`.
    pub family_id: Option<i64>,
    /// Round number, from 1.
    pub round: u32,
    /// Aux channel id.
    pub aux_channel_id: i64,
    /// Aux channel name.
    pub aux_channel: String,
    /// Aux triggers with `snr ≥` this are used.
    pub aux_min_snr: f64,
    /// Padding around the aux extents \[s\].
    pub window_s: f64,
    /// Remaining target triggers in the common analysed time.
    pub targets: u64,
    /// Of those, vetoed by this round.
    pub targets_hit: u64,
    /// Round efficiency (of the remaining target triggers).
    pub efficiency: f64,
    /// Round deadtime (of the remaining analysed time).
    pub deadtime: f64,
    /// Fraction of the used aux triggers with a target trigger in their
    /// window.
    pub aux_hit_fraction: f64,
    /// `efficiency / deadtime`.
    pub lift: f64,
    /// Chance probability of the picked cell.
    pub chance_p: f64,
    /// `log10(chance_p)`, kept where `chance_p` underflows to 0.
    pub chance_p_log10: f64,
    /// Which count `chance_p` is computed on.
    pub chance_basis: ChanceBasis,
    /// False-alarm probability of the pick over every channel and cell.
    pub false_alarm: f64,
    /// How the pick's per-channel false-alarm probability was obtained.
    pub false_alarm_basis: FalseAlarmBasis,
    /// Aux channels compared in this round.
    pub channels_compared: u32,
    /// Vetoed time of this round \[s\].
    pub covered_s: f64,
    /// Fraction of the original target triggers vetoed by all rounds so
    /// far that were not unsafe (this one included).
    pub total_efficiency: f64,
    /// Fraction of the original analysed time vetoed by those rounds.
    pub total_deadtime: f64,
    /// Injections inside the round's common analysed time.
    pub injections: Option<u64>,
    /// Of those, inside the veto segments.
    pub injections_vetoed: Option<u64>,
    /// `injections × deadtime`.
    pub injections_chance: Option<f64>,
    /// Binomial safety probability (decides).
    pub safety_binomial_p: Option<f64>,
    /// Poisson safety probability (reference).
    pub safety_poisson_p: Option<f64>,
    /// `safe`, `unsafe` or `unchecked`.
    pub safety: Safety,
    /// Veto segments \[GPS s\] (not in JSON; see the proposals).
    #[serde(skip)]
    pub segments: SegmentList,
}

/// State of a consolidated proposal.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "snake_case")]
pub enum ProposalState {
    /// Safe against the injections given: proposed for review.
    Proposed,
    /// No injections given: safety not checked.
    #[default]
    Unchecked,
    /// The union vetoes more injections than chance allows.
    Unsafe,
}

impl ProposalState {
    /// The name used in tables, JSON, CSV and the catalogue.
    pub fn as_str(self) -> &'static str {
        match self {
            ProposalState::Proposed => "proposed",
            ProposalState::Unchecked => "unchecked",
            ProposalState::Unsafe => "unsafe",
        }
    }
}

/// All rounds of one aux channel merged into one proposal.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct VetoProposal {
    /// Aux channel id.
    pub aux_channel_id: i64,
    /// Aux channel name.
    pub aux_channel: String,
    /// The rounds merged, e.g. `all#1 (snr>=12.5, window 0.05 s); family
    /// 2#1 (snr>=20, window 0.01 s)`.
    pub rounds: String,
    /// Number of rounds merged.
    pub round_count: u32,
    /// Veto segments in the union.
    pub segment_count: u64,
    /// Their total length \[s\].
    pub covered_s: f64,
    /// Target analysed time \[s\].
    pub analysed_s: f64,
    /// `covered_s / analysed_s`: the combined deadtime.
    pub deadtime: f64,
    /// Target triggers in the analysed time.
    pub targets: u64,
    /// Of those, inside the union.
    pub targets_vetoed: u64,
    /// `targets_vetoed / targets`.
    pub efficiency: f64,
    /// Injections inside the analysed time.
    pub injections: Option<u64>,
    /// Of those, inside the union.
    pub injections_vetoed: Option<u64>,
    /// `injections × deadtime`.
    pub injections_chance: Option<f64>,
    /// Binomial safety probability (decides).
    pub safety_binomial_p: Option<f64>,
    /// Poisson safety probability (reference).
    pub safety_poisson_p: Option<f64>,
    /// `safe`, `unsafe` or `unchecked`.
    pub safety: Safety,
    /// `proposed`, `unchecked` or `unsafe`.
    pub state: ProposalState,
    /// The union's segments \[GPS s\] (not in JSON; written by `--out`).
    #[serde(skip)]
    pub segments: SegmentList,
}

/// All veto rounds and proposals with the parameters, caution and warnings.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct VetoReport {
    /// Catalogue run id the rounds were stored under (`None` when not stored).
    pub run_id: Option<i64>,
    /// The caution every veto output carries ([`VETO_CAUTION`]).
    pub caution: String,
    /// Lag and sign conventions of the figures.
    pub conventions: String,
    /// Parameters used.
    pub params: VetoParams,
    /// Number of injections given (None without `--injections`).
    pub injections_given: Option<u64>,
    /// Rounds, mode `all` first, then each family.
    pub rounds: Vec<VetoRound>,
    /// One proposal per aux channel picked in a round that was not unsafe.
    pub proposals: Vec<VetoProposal>,
    /// Deadtime of the union of every proposal not unsafe (fraction).
    pub combined_deadtime: f64,
    /// Fraction of target triggers inside that union.
    pub combined_efficiency: f64,
    /// Warnings (e.g. injections outside analysed time).
    pub warnings: Vec<String>,
}

/// Conventions written into every veto report.
pub const VETO_CONVENTIONS: &str = "deadtime, efficiency and fractions are fractions (0-1); \
windows are paddings around each aux trigger's extent [s]; chance_p is the probability of a \
cell's count by chance; false_alarm includes the choice of the best cell and channel; safety \
decides on the binomial probability.";

/// Sorted injection times inside `list`, and how many lie in `veto`.
fn injections_in(injections: &[f64], list: &SegmentList, veto: &SegmentList) -> (u64, u64) {
    let inside: Vec<f64> = injections
        .iter()
        .copied()
        .filter(|&t| list.contains(t))
        .collect();
    let k = inside.iter().filter(|&&t| veto.contains(t)).count();
    (inside.len() as u64, k as u64)
}

/// The best row of each channel (zero lag, no slides) by chance
/// probability, for the channels not excluded.
fn fast_ranking(
    aux: &[AuxChannel],
    excluded: &[i64],
    index: &TargetIndex,
    analysed: &SegmentList,
    pairs: &[(f64, Option<i64>)],
    sets: &[Option<i64>],
    grid: &Grid,
) -> Vec<(usize, WitnessStat)> {
    aux.par_iter()
        .enumerate()
        .filter(|(_, ch)| !excluded.contains(&ch.id))
        .filter_map(|(i, ch)| {
            channel_rows(ch, index, analysed, pairs, sets, grid, 0)
                .into_iter()
                .min_by(|a, b| {
                    a.chance_p_log10
                        .total_cmp(&b.chance_p_log10)
                        .then_with(|| better(b, a))
                })
                .map(|r| (i, r))
        })
        .collect()
}

/// Run the rounds for one target set (`family = None`: all target
/// triggers, mode `all`).
pub fn hierarchical_rounds(
    targets: &TargetSet,
    family: Option<i64>,
    aux: &[AuxChannel],
    params: &VetoParams,
    injections: Option<&[f64]>,
) -> Vec<VetoRound> {
    let mode = if family.is_some() { "family" } else { "all" };
    let mut analysed_now = targets.analysed.clone();
    let total_s = analysed_now.total();
    let sets = [family];
    let mut remaining: Vec<(f64, Option<i64>)> = targets
        .triggers
        .iter()
        .filter(|t| (family.is_none() || t.family == family) && analysed_now.contains(t.t_peak))
        .map(|t| (t.t_peak, t.family))
        .collect();
    let n0 = remaining.len();
    let mut vetoed_union = SegmentList::new();
    let mut excluded: Vec<i64> = Vec::new();
    let mut rounds = Vec::new();
    for round in 1..=params.max_rounds {
        if remaining.is_empty() {
            break;
        }
        let index = TargetIndex::new(&remaining, &sets, &analysed_now);
        let mut ranked = fast_ranking(
            aux,
            &excluded,
            &index,
            &analysed_now,
            &remaining,
            &sets,
            &params.grid,
        );
        let compared = ranked.len();
        ranked.sort_by(|a, b| {
            a.1.chance_p_log10
                .total_cmp(&b.1.chance_p_log10)
                .then_with(|| better(&b.1, &a.1))
        });
        let pick = ranked
            .iter()
            .take(params.candidates)
            .collect::<Vec<_>>()
            .par_iter()
            .filter_map(|(i, _)| {
                channel_rows(
                    &aux[*i],
                    &index,
                    &analysed_now,
                    &remaining,
                    &sets,
                    &params.grid,
                    params.slides,
                )
                .into_iter()
                .max_by(better)
                .map(|r| (*i, r))
            })
            .max_by(|a, b| better(&a.1, &b.1));
        let Some((ci, best)) = pick else { break };
        let round_fa = sidak(best.false_alarm, compared as f64);
        if best.targets_hit == 0 || round_fa > params.false_alarm {
            break;
        }
        let ch = &aux[ci];
        let Some(prep) = Prepared::new(
            ch,
            &analysed_now,
            &Thresholds::Fixed(vec![best.aux_min_snr]),
            &[best.window_s],
        ) else {
            break;
        };
        let segments = prep.segments(0, best.window_s);
        let check = safety_check(
            injections.map(|inj| injections_in(inj, &prep.common, &segments)),
            best.deadtime,
            params.safety_p,
        );
        if check.safety == Safety::Unsafe {
            excluded.push(ch.id);
        } else {
            let times: Vec<f64> = remaining.iter().map(|r| r.0).collect();
            let in_common: Vec<bool> = times.iter().map(|&t| prep.common.contains(t)).collect();
            let mask = hit_mask(&prep, &times, 0, best.window_s);
            let mut keep = in_common.iter().zip(&mask).map(|(&c, &m)| !(c && m));
            remaining.retain(|_| keep.next().unwrap_or(true));
            vetoed_union = vetoed_union.union(&segments);
            analysed_now = analysed_now.difference(&segments);
        }
        let frac = |a: f64, b: f64| if b > 0.0 { a / b } else { 0.0 };
        rounds.push(VetoRound {
            mode: mode.to_string(),
            family_id: family,
            round: round as u32,
            aux_channel_id: best.aux_channel_id,
            aux_channel: best.aux_channel.clone(),
            aux_min_snr: best.aux_min_snr,
            window_s: best.window_s,
            targets: best.targets,
            targets_hit: best.targets_hit,
            efficiency: best.efficiency,
            deadtime: best.deadtime,
            aux_hit_fraction: best.aux_hit_fraction,
            lift: best.lift,
            chance_p: best.chance_p,
            chance_p_log10: best.chance_p_log10,
            chance_basis: best.chance_basis,
            false_alarm: round_fa,
            false_alarm_basis: best.false_alarm_basis,
            channels_compared: compared as u32,
            covered_s: best.covered_s,
            total_efficiency: frac((n0 - remaining.len()) as f64, n0 as f64),
            total_deadtime: frac(vetoed_union.total(), total_s),
            injections: check.injections,
            injections_vetoed: check.injections_vetoed,
            injections_chance: check.injections_chance,
            safety_binomial_p: check.binomial_p,
            safety_poisson_p: check.poisson_p,
            safety: check.safety,
            segments,
        });
    }
    rounds
}

/// `all#1 (snr>=12.5, window 0.05 s)`.
fn round_name(r: &VetoRound) -> String {
    let set = match r.family_id {
        None => "all".to_string(),
        Some(f) => format!("family {f}"),
    };
    format!(
        "{set}#{} (snr>={}, window {} s)",
        r.round,
        crate::output::fixed(r.aux_min_snr, 3),
        r.window_s
    )
}

/// One proposal per aux channel over every round that was not unsafe.
pub fn consolidate(
    targets: &TargetSet,
    rounds: &[VetoRound],
    injections: Option<&[f64]>,
    safety_p: f64,
) -> Vec<VetoProposal> {
    let mut order: Vec<i64> = Vec::new();
    for r in rounds.iter().filter(|r| r.safety != Safety::Unsafe) {
        if !order.contains(&r.aux_channel_id) {
            order.push(r.aux_channel_id);
        }
    }
    let analysed = &targets.analysed;
    let analysed_s = analysed.total();
    let in_analysed: Vec<f64> = targets
        .triggers
        .iter()
        .map(|t| t.t_peak)
        .filter(|&t| analysed.contains(t))
        .collect();
    order
        .into_iter()
        .map(|id| {
            let mine: Vec<&VetoRound> = rounds
                .iter()
                .filter(|r| r.aux_channel_id == id && r.safety != Safety::Unsafe)
                .collect();
            let segments = mine
                .iter()
                .fold(SegmentList::new(), |u, r| u.union(&r.segments))
                .intersection(analysed);
            let covered_s = segments.total();
            let deadtime = if analysed_s > 0.0 {
                covered_s / analysed_s
            } else {
                0.0
            };
            let vetoed = in_analysed
                .iter()
                .filter(|&&t| segments.contains(t))
                .count() as u64;
            let check = safety_check(
                injections.map(|inj| injections_in(inj, analysed, &segments)),
                deadtime,
                safety_p,
            );
            let state = match check.safety {
                Safety::Safe if mine.iter().all(|r| r.safety == Safety::Safe) => {
                    ProposalState::Proposed
                }
                Safety::Unsafe => ProposalState::Unsafe,
                _ => ProposalState::Unchecked,
            };
            VetoProposal {
                aux_channel_id: id,
                aux_channel: mine[0].aux_channel.clone(),
                rounds: mine
                    .iter()
                    .map(|r| round_name(r))
                    .collect::<Vec<_>>()
                    .join("; "),
                round_count: mine.len() as u32,
                segment_count: segments.segments().len() as u64,
                covered_s,
                analysed_s,
                deadtime,
                targets: in_analysed.len() as u64,
                targets_vetoed: vetoed,
                efficiency: if in_analysed.is_empty() {
                    0.0
                } else {
                    vetoed as f64 / in_analysed.len() as f64
                },
                injections: check.injections,
                injections_vetoed: check.injections_vetoed,
                injections_chance: check.injections_chance,
                safety_binomial_p: check.binomial_p,
                safety_poisson_p: check.poisson_p,
                safety: check.safety,
                state,
                segments,
            }
        })
        .collect()
}

/// Rounds over all target triggers (mode `all`) and, when
/// `params.per_family`, for each family; one proposal per channel; plus
/// warnings for injections outside the target analysed time.
pub fn veto_report(
    targets: &TargetSet,
    aux: &[AuxChannel],
    params: &VetoParams,
    injections: Option<&[f64]>,
) -> VetoReport {
    let mut warnings = Vec::new();
    if let Some(inj) = injections {
        let outside: Vec<f64> = inj
            .iter()
            .copied()
            .filter(|&t| !targets.analysed.contains(t))
            .collect();
        if !outside.is_empty() {
            let shown: Vec<String> = outside.iter().take(5).map(|t| format!("{t:.6}")).collect();
            warnings.push(format!(
                "{} of {} injections lie outside the target analysed time and are ignored \
                 (first: {})",
                outside.len(),
                inj.len(),
                shown.join(", ")
            ));
        }
    }
    let mut rounds = hierarchical_rounds(targets, None, aux, params, injections);
    if params.per_family {
        for f in targets.family_ids() {
            rounds.extend(hierarchical_rounds(
                targets,
                Some(f),
                aux,
                params,
                injections,
            ));
        }
    }
    let proposals = consolidate(targets, &rounds, injections, params.safety_p);
    let union = proposals
        .iter()
        .filter(|p| p.state != ProposalState::Unsafe)
        .fold(SegmentList::new(), |u, p| u.union(&p.segments));
    let analysed_s = targets.analysed.total();
    let in_analysed: Vec<f64> = targets
        .triggers
        .iter()
        .map(|t| t.t_peak)
        .filter(|&t| targets.analysed.contains(t))
        .collect();
    let vetoed = in_analysed.iter().filter(|&&t| union.contains(t)).count();
    VetoReport {
        run_id: None,
        caution: VETO_CAUTION.to_string(),
        conventions: VETO_CONVENTIONS.to_string(),
        params: params.clone(),
        injections_given: injections.map(|i| i.len() as u64),
        rounds,
        proposals,
        combined_deadtime: if analysed_s > 0.0 {
            union.total() / analysed_s
        } else {
            0.0
        },
        combined_efficiency: if in_analysed.is_empty() {
            0.0
        } else {
            vetoed as f64 / in_analysed.len() as f64
        },
        warnings,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn safety_without_injections_is_unchecked() {
        let c = safety_check(None, 0.2, 1e-5);
        assert_eq!(c.safety, Safety::Unchecked);
        assert_eq!(c.binomial_p, None);
        // Nothing vetoed: P(X ≥ 0) = 1, safe.
        let c = safety_check(Some((30, 0)), 0.01, 1e-5);
        assert_eq!((c.safety, c.binomial_p), (Safety::Safe, Some(1.0)));
    }

    #[test]
    fn too_few_injections_to_fail_is_unchecked() {
        // 2 injections, deadtime 0.005: even both vetoed gives
        // P(X >= 2 | Binomial(2, 0.005)) = 0.005^2 = 2.5e-5 (exact, by hand),
        // not below 1e-5: the check cannot fail, so it is not a pass.
        let c = safety_check(Some((2, 2)), 0.005, 1e-5);
        assert_eq!(c.safety, Safety::Unchecked);
        assert!((c.binomial_p.unwrap() - 2.5e-5).abs() < 1e-12);
        // No injection inside the analysed time: nothing to check.
        assert_eq!(
            safety_check(Some((0, 0)), 0.005, 1e-5).safety,
            Safety::Unchecked
        );
        // 3 at 0.005: 1.25e-7 is reachable, and 3 of 3 vetoed is unsafe.
        assert_eq!(
            safety_check(Some((3, 3)), 0.005, 1e-5).safety,
            Safety::Unsafe
        );
        assert_eq!(safety_check(Some((3, 0)), 0.005, 1e-5).safety, Safety::Safe);
    }
}
