//! Catalogue layer: read target triggers (with families when the
//! `family_members` table exists), aux triggers and analysed segments from
//! the 0001 tables; run the witness table or the veto rounds; store the
//! results with the parameters used, in one transaction.

use super::lag::{lag_summary, LagSummary};
use super::veto::{veto_report, VetoParams, VetoReport};
use super::{
    best_per_set, better, witness_table, AuxChannel, AuxTrigger, Grid, TargetSet, TargetTrigger,
    WitnessStat, DEFAULT_SLIDES, DEFAULT_WITNESS_FALSE_ALARM,
};
use crate::catalogue::from_ns;
use crate::segments::{Segment, SegmentList};
use anyhow::{bail, Context, Result};
use rusqlite::{params, Connection, OptionalExtension};
use serde::{Deserialize, Serialize};

/// Parameters of the witness table.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct WitnessParams {
    /// Only this family (else: all target triggers and every family).
    pub family: Option<i64>,
    /// Threshold × window grid.
    pub grid: Grid,
    /// Only target triggers with `snr ≥` this (default: all).
    pub target_min_snr: Option<f64>,
    /// Bins of the lag histogram (default 21).
    pub lag_bins: usize,
    /// Time slides per (channel, set) for the background (default
    /// [`DEFAULT_SLIDES`]; 0 = Bonferroni over the grid).
    pub slides: usize,
    /// A row is beyond chance when its false-alarm probability over all
    /// channels compared is below this (default 0.01).
    pub false_alarm: f64,
}

impl Default for WitnessParams {
    fn default() -> Self {
        WitnessParams {
            family: None,
            grid: Grid::default(),
            target_min_snr: None,
            lag_bins: 21,
            slides: DEFAULT_SLIDES,
            false_alarm: DEFAULT_WITNESS_FALSE_ALARM,
        }
    }
}

impl WitnessParams {
    /// Validate the parameters.
    ///
    /// # Errors
    /// A one-line message naming the offending field.
    pub fn check(&self) -> Result<()> {
        self.grid.check()?;
        if !(self.false_alarm > 0.0 && self.false_alarm < 1.0) {
            bail!("false_alarm: {} must lie in (0, 1)", self.false_alarm);
        }
        if self.lag_bins == 0 {
            bail!("lag_bins must be at least 1");
        }
        Ok(())
    }
}

/// Result of `witnesses`.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct WitnessReport {
    /// Catalogue run id the results were stored under.
    pub run_id: i64,
    /// Parameters used.
    pub params: WitnessParams,
    /// Lag convention of the lag summaries.
    pub lag_definition: String,
    /// Best cell for each (target set, channel), sorted by target set (all
    /// first, then family id) and by [`better`], best first.
    pub best: Vec<WitnessStat>,
    /// Lag/frequency summary of the best (channel, threshold, window) of
    /// each target set.
    pub lags: Vec<LagSummary>,
    /// The full grid (also stored in the catalogue).
    pub rows: Vec<WitnessStat>,
    /// Warnings.
    pub warnings: Vec<String>,
}

fn table_exists(conn: &Connection, name: &str) -> Result<bool> {
    Ok(conn
        .query_row(
            "SELECT 1 FROM sqlite_master WHERE type = 'table' AND name = ?1",
            [name],
            |_| Ok(()),
        )
        .optional()?
        .is_some())
}

/// Union of the analysed segments over every scan of a channel.
pub fn channel_analysed(conn: &Connection, channel_id: i64) -> Result<SegmentList> {
    let mut st = conn.prepare_cached(
        "SELECT a.start_ns, a.end_ns FROM analysed_segments a JOIN scans s ON a.scan_id = s.id \
         WHERE s.channel_id = ?1",
    )?;
    let segs = st
        .query_map([channel_id], |r| {
            Ok(Segment::new(from_ns(r.get(0)?), from_ns(r.get(1)?)))
        })?
        .collect::<rusqlite::Result<Vec<_>>>()?;
    Ok(SegmentList::from_segments(segs))
}

/// Target triggers of every `role = 'target'` channel (analysed time: union
/// over those channels) with their family from `family_members` when that
/// table exists.
///
/// # Errors
/// No target channel in the catalogue, or SQL errors.
pub fn load_targets(conn: &Connection, min_snr: Option<f64>) -> Result<TargetSet> {
    let ids: Vec<i64> = conn
        .prepare("SELECT id FROM channels WHERE role = 'target' ORDER BY id")?
        .query_map([], |r| r.get(0))?
        .collect::<rusqlite::Result<_>>()?;
    if ids.is_empty() {
        bail!("catalogue has no target channel: scan or import a target channel first");
    }
    let mut analysed = SegmentList::new();
    for id in &ids {
        analysed = analysed.union(&channel_analysed(conn, *id)?);
    }
    if analysed.is_empty() {
        bail!("target channel has no analysed segments in the catalogue: nothing to compare");
    }
    let sql = if table_exists(conn, "family_members")? {
        "SELECT t.t_peak_ns, t.snr, t.f_peak_hz, fm.family_id FROM triggers t \
         JOIN channels c ON t.channel_id = c.id \
         LEFT JOIN family_members fm ON fm.trigger_id = t.id WHERE c.role = 'target'"
    } else {
        "SELECT t.t_peak_ns, t.snr, t.f_peak_hz, NULL FROM triggers t \
         JOIN channels c ON t.channel_id = c.id WHERE c.role = 'target'"
    };
    let floor = min_snr.unwrap_or(f64::NEG_INFINITY);
    let triggers: Vec<TargetTrigger> = conn
        .prepare(sql)?
        .query_map([], |r| {
            Ok(TargetTrigger {
                t_peak: from_ns(r.get(0)?),
                snr: r.get(1)?,
                f_peak: r.get(2)?,
                family: r.get(3)?,
            })
        })?
        .collect::<rusqlite::Result<Vec<_>>>()?
        .into_iter()
        .filter(|t| t.snr >= floor)
        .collect();
    Ok(TargetSet::new(triggers, analysed))
}

/// Every `role = 'aux'` channel with its triggers and analysed time.
pub fn load_aux(conn: &Connection) -> Result<Vec<AuxChannel>> {
    let chans: Vec<(i64, String)> = conn
        .prepare("SELECT id, name FROM channels WHERE role = 'aux' ORDER BY name")?
        .query_map([], |r| Ok((r.get(0)?, r.get(1)?)))?
        .collect::<rusqlite::Result<_>>()?;
    let mut st = conn.prepare(
        "SELECT t_peak_ns, t_start_ns, t_end_ns, snr, f_peak_hz FROM triggers \
         WHERE channel_id = ?1 ORDER BY t_peak_ns",
    )?;
    let mut out = Vec::with_capacity(chans.len());
    for (id, name) in chans {
        let trig = st
            .query_map([id], |r| {
                Ok(AuxTrigger {
                    t_peak: from_ns(r.get(0)?),
                    t_start: from_ns(r.get(1)?),
                    t_end: from_ns(r.get(2)?),
                    snr: r.get(3)?,
                    f_peak: r.get(4)?,
                })
            })?
            .collect::<rusqlite::Result<Vec<_>>>()?;
        out.push(AuxChannel::new(
            id,
            &name,
            trig,
            channel_analysed(conn, id)?,
        ));
    }
    Ok(out)
}

/// Warnings for missing coverage: no aux channel, or aux channels with no
/// analysed time in common with the target (they give no rows).
pub fn coverage_warnings(targets: &TargetSet, aux: &[AuxChannel]) -> Vec<String> {
    let mut warnings = Vec::new();
    if aux.is_empty() {
        warnings.push("catalogue has no aux channel: nothing to compare with".to_string());
    }
    for ch in aux {
        if targets.analysed.intersection(&ch.analysed).total() <= 0.0 {
            warnings.push(format!(
                "aux channel {}: no analysed time in common with the target; skipped",
                ch.name
            ));
        }
    }
    warnings
}

fn insert_run(tx: &rusqlite::Transaction, kind: &str, params_json: &str) -> Result<i64> {
    tx.execute(
        "INSERT INTO witness_runs (kind, created_utc, params_json, tool_version) \
         VALUES (?1, strftime('%Y-%m-%dT%H:%M:%SZ', 'now'), ?2, ?3)",
        params![kind, params_json, env!("CARGO_PKG_VERSION")],
    )?;
    Ok(tx.last_insert_rowid())
}

/// Compute the witness table (all target triggers and every family, or one
/// family) with its background, the lag/frequency summary of each set's
/// best row, and store everything under a new `witness_runs` row in one
/// transaction.
///
/// # Errors
/// Invalid parameters, an unknown family, no target channel, SQL errors.
pub fn run_witnesses(conn: &mut Connection, params: &WitnessParams) -> Result<WitnessReport> {
    params.check()?;
    let targets = load_targets(conn, params.target_min_snr)?;
    let aux = load_aux(conn)?;
    let warnings = coverage_warnings(&targets, &aux);
    let sets: Vec<Option<i64>> = match params.family {
        Some(f) => {
            if !targets.family_ids().contains(&f) {
                return Err(crate::Error::not_found(
                    "family",
                    f,
                    format!("family {f}: no target trigger belongs to it"),
                )
                .into());
            }
            vec![Some(f)]
        }
        None => std::iter::once(None)
            .chain(targets.family_ids().into_iter().map(Some))
            .collect(),
    };
    let rows = witness_table(
        &targets,
        &sets,
        &aux,
        &params.grid,
        params.slides,
        params.false_alarm,
    );
    // Best row per (set, channel) in one pass, then sorted per set.
    let mut best_of: std::collections::HashMap<(Option<i64>, i64), &WitnessStat> =
        std::collections::HashMap::new();
    for r in &rows {
        best_of
            .entry((r.family_id, r.aux_channel_id))
            .and_modify(|b| {
                if better(r, b).is_gt() {
                    *b = r;
                }
            })
            .or_insert(r);
    }
    let mut best: Vec<WitnessStat> = Vec::new();
    for set in &sets {
        let mut per_channel: Vec<WitnessStat> = best_of
            .iter()
            .filter(|((f, _), _)| f == set)
            .map(|(_, r)| (*r).clone())
            .collect();
        per_channel.sort_by(|a, b| better(b, a));
        best.extend(per_channel);
    }
    let lags: Vec<LagSummary> = best_per_set(&rows, &sets)
        .into_iter()
        .filter(|b| b.targets_hit > 0)
        .map(|b| {
            let ch = aux
                .iter()
                .find(|c| c.id == b.aux_channel_id)
                .expect("row channel");
            lag_summary(
                &targets,
                b.family_id,
                ch,
                b.aux_min_snr,
                b.window_s,
                params.lag_bins,
            )
        })
        .collect();
    let tx = conn.transaction()?;
    let run_id = insert_run(&tx, "witnesses", &serde_json::to_string(params)?)?;
    {
        let mut st = tx.prepare_cached(
            "INSERT INTO witness_stats (run_id, family_id, aux_channel_id, aux_min_snr, \
             window_s, targets, targets_hit, aux_triggers, aux_hit, covered_s, analysed_s, \
             deadtime, efficiency, aux_hit_fraction, lift, targets_hit_chance, aux_hit_chance, \
             target_clumping, aux_clumping, chance_p, chance_p_log10, chance_basis, slides, \
             slide_p, false_alarm, false_alarm_basis, false_alarm_any, channels_compared, \
             beyond_chance) \
             VALUES (?1,?2,?3,?4,?5,?6,?7,?8,?9,?10,?11,?12,?13,?14,?15,?16,?17,?18,?19,?20,\
             ?21,?22,?23,?24,?25,?26,?27,?28,?29)",
        )?;
        for r in &rows {
            st.execute(params![
                run_id,
                r.family_id,
                r.aux_channel_id,
                r.aux_min_snr,
                r.window_s,
                r.targets as i64,
                r.targets_hit as i64,
                r.aux_triggers as i64,
                r.aux_hit as i64,
                r.covered_s,
                r.analysed_s,
                r.deadtime,
                r.efficiency,
                r.aux_hit_fraction,
                r.lift,
                r.targets_hit_chance,
                r.aux_hit_chance,
                r.target_clumping,
                r.aux_clumping,
                r.chance_p,
                r.chance_p_log10,
                r.chance_basis.as_str(),
                r.slides,
                r.slide_p,
                r.false_alarm,
                r.false_alarm_basis.as_str(),
                r.false_alarm_any,
                r.channels_compared,
                r.beyond_chance,
            ])?;
        }
        let mut st = tx.prepare_cached(
            "INSERT INTO witness_lags (run_id, family_id, aux_channel_id, aux_min_snr, \
             window_s, lag_hist_json, pairs, lag_peak_s, lag_median_s, freq_relation, \
             freq_ratio_median) VALUES (?1,?2,?3,?4,?5,?6,?7,?8,?9,?10,?11)",
        )?;
        for l in &lags {
            let hist = serde_json::json!({
                "lag": super::lag::LAG_DEFINITION,
                "edges_s": l.edges_s,
                "counts": l.counts,
            });
            st.execute(params![
                run_id,
                l.family_id,
                l.aux_channel_id,
                l.aux_min_snr,
                l.window_s,
                hist.to_string(),
                l.pairs as i64,
                l.lag_peak_s,
                l.lag_median_s,
                l.freq_relation,
                l.freq_ratio_median,
            ])?;
        }
    }
    tx.commit().context("storing witness results")?;
    Ok(WitnessReport {
        run_id,
        params: params.clone(),
        lag_definition: super::lag::LAG_DEFINITION.to_string(),
        best,
        lags,
        rows,
        warnings,
    })
}

/// Run the veto rounds (mode `all`, and per family when
/// `params.per_family`), with the safety check when `injections` \[GPS s\]
/// are given, consolidate one proposal per channel, and store rounds and
/// proposals under a new `witness_runs` row in one transaction (the
/// report's `run_id` names the row).
///
/// # Errors
/// Invalid parameters, no target channel, SQL errors.
pub fn run_vetoes(
    conn: &mut Connection,
    params: &VetoParams,
    injections: Option<&[f64]>,
) -> Result<VetoReport> {
    params.check()?;
    let targets = load_targets(conn, params.target_min_snr)?;
    let aux = load_aux(conn)?;
    let mut report = veto_report(&targets, &aux, params, injections);
    let mut warnings = coverage_warnings(&targets, &aux);
    warnings.append(&mut report.warnings);
    report.warnings = warnings;
    let tx = conn.transaction()?;
    let run_id = insert_run(&tx, "vetoes", &serde_json::to_string(params)?)?;
    {
        let mut st = tx.prepare_cached(
            "INSERT INTO veto_rounds (run_id, mode, family_id, round, aux_channel_id, \
             aux_min_snr, window_s, targets, targets_hit, efficiency, deadtime, \
             aux_hit_fraction, lift, chance_p, chance_p_log10, chance_basis, false_alarm, \
             false_alarm_basis, channels_compared, covered_s, total_efficiency, total_deadtime, \
             injections, injections_vetoed, injections_chance, safety_binomial_p, \
             safety_poisson_p, safety) \
             VALUES (?1,?2,?3,?4,?5,?6,?7,?8,?9,?10,?11,?12,?13,?14,?15,?16,?17,?18,?19,?20,\
             ?21,?22,?23,?24,?25,?26,?27,?28)",
        )?;
        for r in &report.rounds {
            st.execute(params![
                run_id,
                r.mode,
                r.family_id,
                r.round,
                r.aux_channel_id,
                r.aux_min_snr,
                r.window_s,
                r.targets as i64,
                r.targets_hit as i64,
                r.efficiency,
                r.deadtime,
                r.aux_hit_fraction,
                r.lift,
                r.chance_p,
                r.chance_p_log10,
                r.chance_basis.as_str(),
                r.false_alarm,
                r.false_alarm_basis.as_str(),
                r.channels_compared,
                r.covered_s,
                r.total_efficiency,
                r.total_deadtime,
                r.injections.map(|x| x as i64),
                r.injections_vetoed.map(|x| x as i64),
                r.injections_chance,
                r.safety_binomial_p,
                r.safety_poisson_p,
                r.safety.as_str(),
            ])?;
        }
        let mut st = tx.prepare_cached(
            "INSERT INTO veto_proposals (run_id, aux_channel_id, rounds, round_count, \
             segment_count, covered_s, analysed_s, deadtime, targets, targets_vetoed, \
             efficiency, injections, injections_vetoed, injections_chance, safety_binomial_p, \
             safety_poisson_p, safety, state) \
             VALUES (?1,?2,?3,?4,?5,?6,?7,?8,?9,?10,?11,?12,?13,?14,?15,?16,?17,?18)",
        )?;
        for p in &report.proposals {
            st.execute(params![
                run_id,
                p.aux_channel_id,
                p.rounds,
                p.round_count,
                p.segment_count as i64,
                p.covered_s,
                p.analysed_s,
                p.deadtime,
                p.targets as i64,
                p.targets_vetoed as i64,
                p.efficiency,
                p.injections.map(|x| x as i64),
                p.injections_vetoed.map(|x| x as i64),
                p.injections_chance,
                p.safety_binomial_p,
                p.safety_poisson_p,
                p.safety.as_str(),
                p.state.as_str(),
            ])?;
        }
    }
    tx.commit().context("storing veto rounds")?;
    report.run_id = Some(run_id);
    Ok(report)
}
