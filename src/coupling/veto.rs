//! Hierarchical veto rounds (Smith et al. 2011, Class. Quantum Grav. 28,
//! 235005) with a safety check against injections.
//!
//! Each round computes the full (aux channel × threshold × window) grid on
//! the target triggers still remaining and the time still analysed, picks
//! the most significant combination ([`super::better`]), and — when it
//! passes the safety check — removes the target triggers it vetoes *and*
//! its veto segments from the analysed time (so later rounds do not count
//! time where no target trigger can remain). Rounds stop when the best
//! significance falls below `min_significance`.
//!
//! Safety: with injections (times of simulated signals added to the data),
//! the injections inside the round's common analysed time (N_inj) that fall
//! in its veto segments (n) are compared with `N_inj × deadtime`;
//! `safety_p = P(N ≥ n | Poisson N_inj × deadtime)` (the binomial
//! `P(X ≥ n | N_inj, deadtime)` is reported beside it). A combination with
//! `safety_p < safety_p_min` (default 1e-5, common practice) is marked
//! unsafe, not proposed, and its channel is excluded from later rounds;
//! nothing is removed for it.

use super::coinc::{aux_times_above, channel_grid, nearest_distances, times_in, veto_segments};
use super::stats::{binomial_ln_sf, poisson_ln_sf};
use super::{better, AuxChannel, Grid, TargetSet, VETO_CAUTION};
use crate::segments::SegmentList;
use anyhow::{bail, Result};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

/// Parameters of the veto rounds.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct VetoParams {
    /// Threshold × window grid (default [`Grid::default`]).
    pub grid: Grid,
    /// Stop when the best significance is below this (default 5).
    pub min_significance: f64,
    /// Safety probability below which a veto is unsafe (default 1e-5,
    /// common practice).
    pub safety_p: f64,
    /// Also run the rounds separately for each family (mode `family`).
    pub per_family: bool,
    /// Upper bound on rounds per mode/family (default 100).
    pub max_rounds: usize,
    /// Only target triggers with `snr ≥` this (default: all).
    pub target_min_snr: Option<f64>,
}

impl Default for VetoParams {
    fn default() -> Self {
        VetoParams {
            grid: Grid::default(),
            min_significance: 5.0,
            safety_p: 1e-5,
            per_family: true,
            max_rounds: 100,
            target_min_snr: None,
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
        if !self.min_significance.is_finite() || self.min_significance < 0.0 {
            bail!(
                "min_significance: {} must be a finite value ≥ 0",
                self.min_significance
            );
        }
        if !(self.safety_p > 0.0 && self.safety_p < 1.0) {
            bail!("safety_p: {} must lie in (0, 1)", self.safety_p);
        }
        if self.max_rounds == 0 {
            bail!("max_rounds must be at least 1");
        }
        Ok(())
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
    pub channel: String,
    /// Aux SNR threshold.
    pub snr_threshold: f64,
    /// Window half-width \[s\].
    pub window_s: f64,
    /// Remaining target triggers in the common analysed time.
    pub n_target: u64,
    /// Of those, vetoed by this round.
    pub n_coinc: u64,
    /// Round efficiency (of the remaining target triggers).
    pub efficiency: f64,
    /// Round deadtime (of the remaining analysed time).
    pub deadtime: f64,
    /// Use percentage \[%\].
    pub use_percentage: f64,
    /// Coincidences expected by chance.
    pub expected: f64,
    /// `−log10 P(N ≥ n_coinc | Poisson expected)`.
    pub significance: f64,
    /// Vetoed time of this round \[s\].
    pub vetoed_s: f64,
    /// Fraction of the original target triggers vetoed by all proposed
    /// rounds so far (this one included).
    pub cum_efficiency: f64,
    /// Fraction of the original analysed time vetoed by all proposed rounds
    /// so far (this one included).
    pub cum_deadtime: f64,
    /// Injections inside the round's common analysed time (with injections).
    pub n_inj: Option<u64>,
    /// Injections inside the veto segments.
    pub n_inj_vetoed: Option<u64>,
    /// `n_inj × deadtime`.
    pub inj_expected: Option<f64>,
    /// `P(N ≥ n_inj_vetoed | Poisson inj_expected)`.
    pub safety_p: Option<f64>,
    /// `P(X ≥ n_inj_vetoed | Binomial(n_inj, deadtime))`.
    pub safety_p_binomial: Option<f64>,
    /// `false` when `safety_p` is below the limit.
    pub safe: bool,
    /// Whether this veto is proposed to the instrument team.
    pub proposed: bool,
    /// Veto segments \[GPS s\] (not in JSON; written by `--out`).
    #[serde(skip)]
    pub segments: SegmentList,
}

/// All veto rounds with the parameters, caution and warnings.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct VetoReport {
    /// Catalogue run id the rounds were stored under (`None` when not stored).
    pub run_id: Option<i64>,
    /// The caution every veto output carries ([`VETO_CAUTION`]).
    pub caution: String,
    /// Parameters used.
    pub params: VetoParams,
    /// Number of injections given (None without `--injections`).
    pub n_injections: Option<u64>,
    /// Rounds, mode `all` first, then each family.
    pub rounds: Vec<VetoRound>,
    /// Warnings (e.g. injections outside analysed time).
    pub warnings: Vec<String>,
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
    let mut remaining = times_in(&targets.times(family), &analysed_now);
    let n0 = remaining.len();
    let mut vetoed_union = SegmentList::new();
    let mut excluded: Vec<i64> = Vec::new();
    let mut rounds = Vec::new();
    let mut injections_sorted: Vec<f64> = injections.map(<[f64]>::to_vec).unwrap_or_default();
    injections_sorted.sort_by(f64::total_cmp);
    for round in 1..=params.max_rounds {
        let sets = [(family, remaining.clone())];
        let best = aux
            .par_iter()
            .filter(|ch| !excluded.contains(&ch.id))
            .flat_map_iter(|ch| {
                channel_grid(
                    &sets,
                    ch,
                    &analysed_now,
                    &params.grid.snr_thresholds,
                    &params.grid.windows_s,
                )
            })
            .max_by(better);
        let Some(best) = best else { break };
        if best.n_coinc == 0 || best.significance < params.min_significance {
            break;
        }
        let ch = aux
            .iter()
            .find(|c| c.id == best.aux_channel_id && c.name == best.channel)
            .expect("best row comes from one of the channels");
        let common = analysed_now.intersection(&ch.analysed);
        let a = aux_times_above(ch, best.snr_threshold, &common);
        let segments = veto_segments(&a, best.window_s, &common);
        let (mut n_inj, mut n_inj_vetoed, mut inj_expected) = (None, None, None);
        let (mut safety_p, mut safety_p_binomial, mut safe) = (None, None, true);
        if injections.is_some() {
            let inj = times_in(&injections_sorted, &common);
            let k = inj.iter().filter(|&&t| segments.contains(t)).count() as u64;
            let n = inj.len() as u64;
            let mu = n as f64 * best.deadtime;
            let p = poisson_ln_sf(k, mu).exp();
            safe = p >= params.safety_p;
            n_inj = Some(n);
            n_inj_vetoed = Some(k);
            inj_expected = Some(mu);
            safety_p = Some(p);
            safety_p_binomial = Some(binomial_ln_sf(k, n, best.deadtime).exp());
        }
        if safe {
            let in_common = times_in(&remaining, &common);
            let d = nearest_distances(&in_common, &a);
            let vetoed: Vec<f64> = in_common
                .iter()
                .zip(&d)
                .filter(|(_, &d)| d <= best.window_s)
                .map(|(&t, _)| t)
                .collect();
            remaining.retain(|t| vetoed.binary_search_by(|v| v.total_cmp(t)).is_err());
            vetoed_union = vetoed_union.union(&segments);
            analysed_now = analysed_now.difference(&segments);
        } else {
            excluded.push(ch.id);
        }
        let frac = |a: f64, b: f64| if b > 0.0 { a / b } else { 0.0 };
        rounds.push(VetoRound {
            mode: mode.to_string(),
            family_id: family,
            round: round as u32,
            aux_channel_id: best.aux_channel_id,
            channel: best.channel.clone(),
            snr_threshold: best.snr_threshold,
            window_s: best.window_s,
            n_target: best.n_target,
            n_coinc: best.n_coinc,
            efficiency: best.efficiency,
            deadtime: best.deadtime,
            use_percentage: best.use_percentage,
            expected: best.expected,
            significance: best.significance,
            vetoed_s: best.vetoed_s,
            cum_efficiency: frac((n0 - remaining.len()) as f64, n0 as f64),
            cum_deadtime: frac(vetoed_union.total(), total_s),
            n_inj,
            n_inj_vetoed,
            inj_expected,
            safety_p,
            safety_p_binomial,
            safe,
            proposed: safe,
            segments,
        });
    }
    rounds
}

/// Rounds over all target triggers (mode `all`) and, when
/// `params.per_family`, for each family; plus warnings for injections
/// outside the target analysed time.
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
    VetoReport {
        run_id: None,
        caution: VETO_CAUTION.to_string(),
        params: params.clone(),
        n_injections: injections.map(|i| i.len() as u64),
        rounds,
        warnings,
    }
}
