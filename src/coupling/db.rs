//! Catalogue layer: read target triggers (with families when the
//! `family_members` table exists), aux triggers and analysed segments from
//! the 0001 tables; run the witness table or the veto rounds; store the
//! results with the parameters used, in one transaction.

use super::lag::{lag_summary, LagSummary};
use super::veto::{veto_report, VetoParams, VetoReport};
use super::{
    best_per_set, better, witness_table, AuxChannel, AuxTrigger, Grid, TargetSet, TargetTrigger,
    WitnessStat,
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
    /// Bins of the lag histogram over `[−w, w]` (default 21).
    pub lag_bins: usize,
}

impl Default for WitnessParams {
    fn default() -> Self {
        WitnessParams {
            family: None,
            grid: Grid::default(),
            target_min_snr: None,
            lag_bins: 21,
        }
    }
}

/// Result of `witnesses`.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct WitnessReport {
    /// Catalogue run id the results were stored under.
    pub run_id: i64,
    /// Parameters used.
    pub params: WitnessParams,
    /// Best (threshold, window) for each (target set, channel), sorted by
    /// target set (all first, then family id) and significance, descending.
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
        "SELECT t_peak_ns, snr, f_peak_hz FROM triggers WHERE channel_id = ?1 ORDER BY t_peak_ns",
    )?;
    let mut out = Vec::with_capacity(chans.len());
    for (id, name) in chans {
        let trig = st
            .query_map([id], |r| {
                Ok(AuxTrigger {
                    t_peak: from_ns(r.get(0)?),
                    snr: r.get(1)?,
                    f_peak: r.get(2)?,
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
/// family), the lag/frequency summary of each set's best combination, and
/// store everything under a new `witness_runs` row in one transaction.
///
/// # Errors
/// Invalid parameters, an unknown family, no target channel, SQL errors.
pub fn run_witnesses(conn: &mut Connection, params: &WitnessParams) -> Result<WitnessReport> {
    params.grid.check()?;
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
    let rows = witness_table(&targets, &sets, &aux, &params.grid);
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
        .filter(|b| b.n_coinc > 0)
        .map(|b| {
            let ch = aux
                .iter()
                .find(|c| c.id == b.aux_channel_id)
                .expect("row channel");
            lag_summary(
                &targets,
                b.family_id,
                ch,
                b.snr_threshold,
                b.window_s,
                params.lag_bins,
            )
        })
        .collect();
    let tx = conn.transaction()?;
    let run_id = insert_run(&tx, "witnesses", &serde_json::to_string(params)?)?;
    {
        let mut st = tx.prepare_cached(
            "INSERT INTO witness_stats (run_id, family_id, aux_channel_id, snr_threshold, \
             window_s, n_target, n_coinc, n_aux, n_aux_used, vetoed_s, analysed_s, deadtime, \
             efficiency, use_percentage, expected, significance, efficiency_over_deadtime) \
             VALUES (?1,?2,?3,?4,?5,?6,?7,?8,?9,?10,?11,?12,?13,?14,?15,?16,?17)",
        )?;
        for r in &rows {
            st.execute(params![
                run_id,
                r.family_id,
                r.aux_channel_id,
                r.snr_threshold,
                r.window_s,
                r.n_target as i64,
                r.n_coinc as i64,
                r.n_aux as i64,
                r.n_aux_used as i64,
                r.vetoed_s,
                r.analysed_s,
                r.deadtime,
                r.efficiency,
                r.use_percentage,
                r.expected,
                r.significance,
                r.efficiency_over_deadtime,
            ])?;
        }
        let mut st = tx.prepare_cached(
            "INSERT INTO witness_lags (run_id, family_id, aux_channel_id, snr_threshold, \
             window_s, lag_hist_json, n_pairs, peak_lag_s, median_lag_s, freq_relation, \
             freq_ratio_median) VALUES (?1,?2,?3,?4,?5,?6,?7,?8,?9,?10,?11)",
        )?;
        for l in &lags {
            let hist = serde_json::json!({ "edges_s": l.edges_s, "counts": l.counts });
            st.execute(params![
                run_id,
                l.family_id,
                l.aux_channel_id,
                l.snr_threshold,
                l.window_s,
                hist.to_string(),
                l.n_pairs as i64,
                l.peak_lag_s,
                l.median_lag_s,
                l.freq_relation,
                l.freq_ratio_median,
            ])?;
        }
    }
    tx.commit().context("storing witness results")?;
    Ok(WitnessReport {
        run_id,
        params: params.clone(),
        best,
        lags,
        rows,
        warnings,
    })
}

/// Run the hierarchical veto rounds (mode `all`, and per family when
/// `params.per_family`), with the safety check when `injections` \[GPS s\]
/// are given, and store the rounds under a new `witness_runs` row in one
/// transaction (the report's `run_id` names the row).
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
             snr_threshold, window_s, n_target, n_coinc, efficiency, deadtime, use_percentage, \
             expected, significance, vetoed_s, cum_efficiency, cum_deadtime, n_inj, \
             n_inj_vetoed, inj_expected, safety_p, safety_p_binomial, safe, proposed) \
             VALUES (?1,?2,?3,?4,?5,?6,?7,?8,?9,?10,?11,?12,?13,?14,?15,?16,?17,?18,?19,?20,\
             ?21,?22,?23,?24)",
        )?;
        for r in &report.rounds {
            st.execute(params![
                run_id,
                r.mode,
                r.family_id,
                r.round,
                r.aux_channel_id,
                r.snr_threshold,
                r.window_s,
                r.n_target as i64,
                r.n_coinc as i64,
                r.efficiency,
                r.deadtime,
                r.use_percentage,
                r.expected,
                r.significance,
                r.vetoed_s,
                r.cum_efficiency,
                r.cum_deadtime,
                r.n_inj.map(|x| x as i64),
                r.n_inj_vetoed.map(|x| x as i64),
                r.inj_expected,
                r.safety_p,
                r.safety_p_binomial,
                r.safe,
                r.proposed,
            ])?;
        }
    }
    tx.commit().context("storing veto rounds")?;
    report.run_id = Some(run_id);
    Ok(report)
}
