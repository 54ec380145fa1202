//! Gathering the report's content from the catalogue.

use crate::catalogue::from_ns;
use crate::catalogue::now_utc;
use crate::rates::live::{live_time, table_exists};
use crate::rates::{rates, RateParams, RateReport};
use crate::segments::SegmentList;
use anyhow::{Context, Result};
use rusqlite::{params, Connection, OptionalExtension};
use serde::Serialize;
use std::collections::BTreeMap;

/// What the report covers. Defaults: whole catalogue, bins from the span
/// (at least 12, [`crate::rates::auto_bin_s`]), CL 0.9,
/// p0 0.05, 5 examples per family, 200 novel triggers, 20 000 scatter points.
#[derive(Debug, Clone, Serialize)]
pub struct ReportParams {
    /// How the catalogue is named on the pages (usually its path).
    pub catalogue: String,
    /// The target channel reported on (`None`: the catalogue's only target
    /// channel; an error when it has several).
    pub channel: Option<String>,
    /// Span start \[GPS s\] (`None` = start of live time).
    pub since_gps: Option<f64>,
    /// Span end \[GPS s\] (`None` = end of live time).
    pub until_gps: Option<f64>,
    /// Only triggers with SNR ≥ this.
    pub min_snr: f64,
    /// Rate bin width \[s\] (None: chosen from the span).
    pub bin_s: Option<f64>,
    /// Confidence level of rate limits.
    pub cl: f64,
    /// Bayesian-blocks false-positive probability.
    pub p0: f64,
    /// Example (loudest) triggers listed per family.
    pub max_examples: usize,
    /// Novel triggers listed (loudest first).
    pub max_novel: usize,
    /// Points in the time-frequency scatter (evenly thinned above this).
    pub max_tf_points: usize,
}

impl Default for ReportParams {
    fn default() -> Self {
        ReportParams {
            catalogue: String::new(),
            channel: None,
            since_gps: None,
            until_gps: None,
            min_snr: 0.0,
            bin_s: None,
            cl: 0.9,
            p0: 0.05,
            max_examples: 5,
            max_novel: 200,
            max_tf_points: 20_000,
        }
    }
}

/// A trigger listed in a table.
#[derive(Debug, Clone, Copy, Serialize)]
pub struct ExampleTrigger {
    /// `triggers.id`.
    pub id: i64,
    /// Peak time \[GPS s\].
    pub t_gps: f64,
    /// Peak frequency \[Hz\].
    pub f_hz: f64,
    /// SNR.
    pub snr: f64,
    /// Q (if known).
    pub q: Option<f64>,
}

/// One family.
#[derive(Debug, Clone, Serialize)]
pub struct FamilyInfo {
    /// Family id.
    pub id: i64,
    /// Human label (may be absent).
    pub label: Option<String>,
    /// Human note.
    pub note: Option<String>,
    /// active / merged / retired.
    pub status: String,
    /// Loudest members in the span.
    pub examples: Vec<ExampleTrigger>,
    /// SNRs of members in the span, ascending.
    pub snr_sorted: Vec<f64>,
}

/// One witness statistic row (latest witness run).
#[derive(Debug, Clone, Serialize)]
pub struct WitnessRow {
    /// Family (`None` = all target triggers).
    pub family_id: Option<i64>,
    /// Aux channel name.
    pub aux_channel: String,
    /// Aux triggers with SNR at least this are used.
    pub aux_min_snr: f64,
    /// Padding around each aux trigger's extent \[s\].
    pub window_s: f64,
    /// Target triggers.
    pub targets: i64,
    /// Target triggers inside a window.
    pub targets_hit: i64,
    /// Targets hit expected by chance.
    pub targets_hit_chance: f64,
    /// Fraction of target triggers hit.
    pub efficiency: f64,
    /// Fraction of analysed time inside the windows.
    pub deadtime: f64,
    /// Fraction of aux triggers that hit a target trigger.
    pub aux_hit_fraction: f64,
    /// Chance probability of the cell's count.
    pub chance_p: f64,
    /// `targets_poisson`, `aux_binomial` or `slides`.
    pub chance_basis: String,
    /// False-alarm probability of the channel's best cell (None for runs
    /// from before migration 0006_coupling_words).
    pub false_alarm: Option<f64>,
    /// `slides`, `slides_tail` or `bonferroni`.
    pub false_alarm_basis: Option<String>,
    /// False-alarm probability over all channels compared.
    pub false_alarm_any: Option<f64>,
    /// Marked beyond chance.
    pub beyond_chance: Option<bool>,
}

impl ReportData {
    /// The ids of the families on this report (the target channel's).
    pub fn family_ids(&self) -> Vec<i64> {
        self.families.iter().map(|f| f.id).collect()
    }

    /// The best witness of each family marked beyond chance: (family id,
    /// aux channel, window \[s\]); the first such row of the family, the one
    /// `glitchbook witnesses` lists as its best.
    pub fn witnessed_families(&self) -> Vec<(i64, String, f64)> {
        let mut out: Vec<(i64, String, f64)> = Vec::new();
        for w in &self.witnesses {
            let Some(f) = w.family_id else { continue };
            if w.beyond_chance == Some(true) && !out.iter().any(|o| o.0 == f) {
                out.push((f, w.aux_channel.clone(), w.window_s));
            }
        }
        out
    }
}

/// Lag histogram of one (family, aux channel) pair.
#[derive(Debug, Clone, Serialize)]
pub struct LagRow {
    /// Family (`None` = all).
    pub family_id: Option<i64>,
    /// Aux channel name.
    pub aux_channel: String,
    /// Bin edges \[s\].
    pub edges_s: Vec<f64>,
    /// Counts per bin.
    pub counts: Vec<f64>,
    /// Frequency relation, as recorded.
    pub freq_relation: Option<String>,
}

/// One veto round (latest veto run).
#[derive(Debug, Clone, Serialize)]
pub struct VetoRow {
    /// `all` or `family`.
    pub mode: String,
    /// Family (`None` in mode `all`).
    pub family_id: Option<i64>,
    /// Round number.
    pub round: i64,
    /// Aux channel name.
    pub aux_channel: String,
    /// Aux SNR threshold.
    pub aux_min_snr: f64,
    /// Padding \[s\].
    pub window_s: f64,
    /// Efficiency of this round.
    pub efficiency: f64,
    /// Deadtime of this round.
    pub deadtime: f64,
    /// Fraction of aux triggers that hit a target trigger.
    pub aux_hit_fraction: f64,
    /// Chance probability of the picked cell.
    pub chance_p: f64,
    /// False-alarm probability over channels and cells (None before migration 0006_coupling_words).
    pub false_alarm: Option<f64>,
    /// Cumulative efficiency.
    pub total_efficiency: f64,
    /// Cumulative deadtime.
    pub total_deadtime: f64,
    /// Injections in the round's analysed time (if checked).
    pub injections: Option<i64>,
    /// Injections vetoed (if checked).
    pub injections_vetoed: Option<i64>,
    /// Injections expected vetoed by chance.
    pub injections_chance: Option<f64>,
    /// Binomial safety probability (decides).
    pub safety_binomial_p: Option<f64>,
    /// Poisson safety probability (reference).
    pub safety_poisson_p: Option<f64>,
    /// `safe`, `unsafe` or `unchecked`.
    pub safety: String,
}

/// One consolidated proposal (latest veto run).
#[derive(Debug, Clone, Serialize)]
pub struct ProposalRow {
    /// Aux channel name.
    pub aux_channel: String,
    /// The rounds merged.
    pub rounds: String,
    /// Combined deadtime (fraction).
    pub deadtime: f64,
    /// Combined vetoed time \[s\].
    pub covered_s: f64,
    /// Fraction of all target triggers vetoed.
    pub efficiency: f64,
    /// Injections in the analysed time (if checked).
    pub injections: Option<i64>,
    /// Of those, vetoed.
    pub injections_vetoed: Option<i64>,
    /// Expected vetoed by chance.
    pub injections_chance: Option<f64>,
    /// Binomial safety probability (decides).
    pub safety_binomial_p: Option<f64>,
    /// Poisson safety probability (reference).
    pub safety_poisson_p: Option<f64>,
    /// `safe`, `unsafe` or `unchecked`.
    pub safety: String,
    /// `proposed`, `unchecked` or `unsafe`.
    pub state: String,
}

/// Everything the report shows.
#[derive(Debug, Clone, Serialize)]
pub struct ReportData {
    /// Parameters used.
    pub params: ReportParams,
    /// glitchbook version.
    pub tool_version: String,
    /// When the report was made (UTC, ISO 8601).
    pub generated_utc: String,
    /// Rates of all target triggers and of each family.
    pub rates: RateReport,
    /// (channel name, role, triggers in span, live time \[s\]).
    pub channels: Vec<(String, String, i64, f64)>,
    /// Families by id.
    pub families: Vec<FamilyInfo>,
    /// Scatter points: (t \[GPS s\], f \[Hz\], family id).
    pub tf_points: Vec<(f64, f64, Option<i64>)>,
    /// Novel triggers, loudest first.
    pub novel: Vec<ExampleTrigger>,
    /// Novel triggers in the span (before truncation).
    pub n_novel: u64,
    /// SNRs of all target triggers in the span, ascending.
    pub all_snr_sorted: Vec<f64>,
    /// Witness statistics (empty without coupling tables).
    pub witnesses: Vec<WitnessRow>,
    /// Lag histograms.
    pub lags: Vec<LagRow>,
    /// Veto rounds.
    pub vetoes: Vec<VetoRow>,
    /// One proposal per aux channel (latest veto run).
    pub proposals: Vec<ProposalRow>,
    /// Whether the coupling tables exist.
    pub has_coupling: bool,
    /// Cross-validation of the latest classifier by label, if any.
    pub classifier: Option<crate::families::classifier::CrossValidation>,
    /// The seeded starts of the latest clustering run (empty before
    /// clustering or for runs made with one start).
    pub cluster_starts: Vec<crate::families::StartSummary>,
    /// Stretches of the span the target channel was not analysed (shaded
    /// on time plots) \[GPS s\].
    pub gaps_gps: Vec<(f64, f64)>,
}

/// Gather the report's content.
///
/// # Errors
/// Invalid parameters, a catalogue without target channel or analysed time,
/// SQLite errors.
pub fn gather(conn: &Connection, p: &ReportParams) -> Result<ReportData> {
    let bin_s = match p.bin_s {
        Some(b) => b,
        None => {
            let (t0, t1) =
                crate::rates::live_span(conn, p.channel.as_deref(), p.since_gps, p.until_gps)?;
            crate::rates::auto_bin_s(t1 - t0)
        }
    };
    let rp = RateParams {
        bin_s,
        since_gps: p.since_gps,
        until_gps: p.until_gps,
        min_snr: p.min_snr,
        cl: p.cl,
        p0: p.p0,
        channel: p.channel.clone(),
        ..RateParams::default()
    };
    let rates = rates(conn, &rp)?;
    let (t0, t1) = (rates.span_start_gps, rates.span_end_gps);
    let (n0, n1) = (crate::catalogue::to_ns(t0)?, crate::catalogue::to_ns(t1)?);
    let gaps_gps = SegmentList::single(t0, t1)
        .difference(&live_time(conn, rates.channel.id)?)
        .segments()
        .iter()
        .map(|g| (g.start, g.end))
        .collect();

    // Channels: triggers in the span and live time.
    let mut channels = Vec::new();
    {
        let mut stmt = conn.prepare(
            "SELECT c.id, c.name, c.role, (SELECT count(*) FROM triggers t WHERE t.channel_id = c.id \
             AND t.t_peak_ns >= ?1 AND t.t_peak_ns < ?2 AND t.snr >= ?3) FROM channels c ORDER BY c.id",
        )?;
        let rows = stmt
            .query_map(params![n0, n1, p.min_snr], |r| {
                Ok((
                    r.get::<_, i64>(0)?,
                    r.get::<_, String>(1)?,
                    r.get::<_, String>(2)?,
                    r.get::<_, i64>(3)?,
                ))
            })?
            .collect::<rusqlite::Result<Vec<_>>>()?;
        for (id, name, role, n) in rows {
            let live = live_time(conn, id)?.overlap_with(t0, t1);
            channels.push((name, role, n, live));
        }
    }

    // Families and their members.
    let mut families: Vec<FamilyInfo> = Vec::new();
    if rates.has_families {
        let mut stmt = conn.prepare("SELECT id, label, note, status FROM families ORDER BY id")?;
        families = stmt
            .query_map([], |r| {
                Ok(FamilyInfo {
                    id: r.get(0)?,
                    label: r.get(1)?,
                    note: r.get(2)?,
                    status: r.get(3)?,
                    examples: Vec::new(),
                    snr_sorted: Vec::new(),
                })
            })?
            .collect::<rusqlite::Result<Vec<_>>>()?;
    }
    let index: BTreeMap<i64, usize> = families
        .iter()
        .enumerate()
        .map(|(i, f)| (f.id, i))
        .collect();
    let sql = if rates.has_families {
        "SELECT t.id, t.t_peak_ns, t.f_peak_hz, t.snr, t.q, m.family_id, coalesce(m.novel, 0) FROM triggers t \
         LEFT JOIN family_members m ON m.trigger_id = t.id \
         WHERE t.channel_id = ?1 AND t.t_peak_ns >= ?2 AND t.t_peak_ns < ?3 AND t.snr >= ?4 ORDER BY t.t_peak_ns"
    } else {
        "SELECT t.id, t.t_peak_ns, t.f_peak_hz, t.snr, t.q, NULL, 0 FROM triggers t \
         WHERE t.channel_id = ?1 AND t.t_peak_ns >= ?2 AND t.t_peak_ns < ?3 AND t.snr >= ?4 ORDER BY t.t_peak_ns"
    };
    let mut stmt = conn.prepare(sql)?;
    let rows = stmt
        .query_map(params![rates.channel.id, n0, n1, p.min_snr], |r| {
            Ok((
                ExampleTrigger {
                    id: r.get(0)?,
                    t_gps: from_ns(r.get(1)?),
                    f_hz: r.get(2)?,
                    snr: r.get(3)?,
                    q: r.get(4)?,
                },
                r.get::<_, Option<i64>>(5)?,
                r.get::<_, i64>(6)? != 0,
            ))
        })?
        .collect::<rusqlite::Result<Vec<_>>>()
        .context("reading target triggers")?;
    let stride = rows.len().div_ceil(p.max_tf_points.max(1)).max(1);
    let tf_points = rows
        .iter()
        .step_by(stride)
        .map(|(e, f, _)| (e.t_gps, e.f_hz, *f))
        .collect();
    let mut novel: Vec<ExampleTrigger> = Vec::new();
    let mut all_snr_sorted: Vec<f64> = Vec::with_capacity(rows.len());
    for (e, fam, is_novel) in &rows {
        all_snr_sorted.push(e.snr);
        if *is_novel {
            novel.push(*e);
        }
        if let Some(i) = fam.and_then(|f| index.get(&f)) {
            families[*i].snr_sorted.push(e.snr);
            families[*i].examples.push(*e);
        }
    }
    let loudest_first = |v: &mut Vec<ExampleTrigger>, keep: usize| {
        v.sort_by(|a, b| b.snr.total_cmp(&a.snr));
        v.truncate(keep);
    };
    let n_novel = novel.len() as u64;
    loudest_first(&mut novel, p.max_novel);
    for f in &mut families {
        loudest_first(&mut f.examples, p.max_examples);
        f.snr_sorted.sort_by(f64::total_cmp);
    }
    all_snr_sorted.sort_by(f64::total_cmp);

    let has_coupling = [
        "witness_runs",
        "witness_stats",
        "witness_lags",
        "veto_rounds",
        "veto_proposals",
    ]
    .iter()
    .map(|t| table_exists(conn, t))
    .collect::<Result<Vec<_>>>()?
    .into_iter()
    .all(|x| x);
    let (mut witnesses, mut lags, mut vetoes, mut proposals) =
        (Vec::new(), Vec::new(), Vec::new(), Vec::new());
    if has_coupling {
        // `witnesses` and `vetoes` store separate runs: show the latest of each.
        let latest = |kind: &str| -> Result<Option<i64>> {
            Ok(conn.query_row(
                "SELECT max(id) FROM witness_runs WHERE kind = ?1",
                [kind],
                |r| r.get(0),
            )?)
        };
        // A `witnesses --family F` run holds that family only: each target
        // set (a family, or all target triggers) shows its rows from the
        // latest run that computed it, so one family's re-run does not hide
        // the others'.
        let per_set: Vec<(Option<i64>, i64)> = conn
            .prepare(
                "SELECT w.family_id, max(w.run_id) FROM witness_stats w \
                 JOIN witness_runs r ON r.id = w.run_id AND r.kind = 'witnesses' \
                 GROUP BY w.family_id",
            )?
            .query_map([], |r| Ok((r.get(0)?, r.get(1)?)))?
            .collect::<rusqlite::Result<_>>()?;
        let runs: std::collections::BTreeSet<i64> = per_set.iter().map(|&(_, run)| run).collect();
        let chosen = |family: Option<i64>, run: i64| per_set.contains(&(family, run));
        for &run in &runs {
            witnesses.extend(
                read_witnesses(conn, run)?
                    .into_iter()
                    .filter(|w| chosen(w.family_id, run)),
            );
            lags.extend(
                read_lags(conn, run)?
                    .into_iter()
                    .filter(|l| chosen(l.family_id, run)),
            );
        }
        // Target sets in order (all target triggers first), each set's rows
        // in its run's order (the sort is stable).
        witnesses.sort_by_key(|w| w.family_id);
        lags.sort_by_key(|l| l.family_id);
        if let Some(run) = latest("vetoes")? {
            vetoes = read_vetoes(conn, run)?;
            proposals = read_proposals(conn, run)?;
        }
    }
    let classifier = if table_exists(conn, "classifiers")? {
        crate::families::classifier_db::latest_classifier(conn)?.map(|c| c.2)
    } else {
        None
    };
    let cluster_starts = if table_exists(conn, "cluster_runs")? {
        latest_starts(conn)?
    } else {
        Vec::new()
    };
    Ok(ReportData {
        classifier,
        cluster_starts,
        params: p.clone(),
        tool_version: env!("CARGO_PKG_VERSION").to_string(),
        generated_utc: now_utc(),
        rates,
        channels,
        families,
        tf_points,
        novel,
        n_novel,
        all_snr_sorted,
        witnesses,
        lags,
        vetoes,
        proposals,
        has_coupling,
        gaps_gps,
    })
}

/// The seeded starts recorded with the latest clustering run's model
/// (empty when it has none or the model is not one this version reads:
/// the report only shows them; `assign` is where a model must be read).
fn latest_starts(conn: &Connection) -> Result<Vec<crate::families::StartSummary>> {
    let js: Option<String> = conn
        .query_row(
            "SELECT model_json FROM cluster_runs ORDER BY id DESC LIMIT 1",
            [],
            |r| r.get(0),
        )
        .optional()?;
    Ok(js
        .and_then(|j| serde_json::from_str::<serde_json::Value>(&j).ok())
        .and_then(|v| serde_json::from_value(v.get("starts")?.clone()).ok())
        .unwrap_or_default())
}

/// Witness rows of `run`, best first within each target set in the order
/// of [`crate::coupling::better`] (false-alarm probability, chance
/// probability, lift, deadtime, channel, threshold, window), so a channel's
/// first row is the one `glitchbook witnesses` lists as its best.
fn read_witnesses(conn: &Connection, run: i64) -> Result<Vec<WitnessRow>> {
    let mut stmt = conn.prepare(
        "SELECT w.family_id, coalesce(c.name, 'channel ' || w.aux_channel_id), w.aux_min_snr, w.window_s, \
         w.targets, w.targets_hit, w.targets_hit_chance, w.efficiency, w.deadtime, w.aux_hit_fraction, \
         w.chance_p, w.chance_basis, w.false_alarm, w.false_alarm_basis, w.false_alarm_any, w.beyond_chance \
         FROM witness_stats w LEFT JOIN channels c ON c.id = w.aux_channel_id WHERE w.run_id = ?1 \
         ORDER BY w.family_id, coalesce(w.false_alarm, 1.0), w.chance_p_log10, w.lift DESC, w.deadtime, \
         2, w.aux_min_snr DESC, w.window_s",
    )?;
    let rows = stmt
        .query_map(params![run], |r| {
            Ok(WitnessRow {
                family_id: r.get(0)?,
                aux_channel: r.get(1)?,
                aux_min_snr: r.get(2)?,
                window_s: r.get(3)?,
                targets: r.get(4)?,
                targets_hit: r.get(5)?,
                targets_hit_chance: r.get(6)?,
                efficiency: r.get(7)?,
                deadtime: r.get(8)?,
                aux_hit_fraction: r.get(9)?,
                chance_p: r.get(10)?,
                chance_basis: r.get(11)?,
                false_alarm: r.get(12)?,
                false_alarm_basis: r.get(13)?,
                false_alarm_any: r.get(14)?,
                beyond_chance: r.get::<_, Option<i64>>(15)?.map(|b| b != 0),
            })
        })?
        .collect::<rusqlite::Result<Vec<_>>>()
        .context("reading witness_stats")?;
    Ok(rows)
}

fn read_lags(conn: &Connection, run: i64) -> Result<Vec<LagRow>> {
    let mut stmt = conn.prepare(
        "SELECT l.family_id, coalesce(c.name, 'channel ' || l.aux_channel_id), l.lag_hist_json, l.freq_relation \
         FROM witness_lags l LEFT JOIN channels c ON c.id = l.aux_channel_id WHERE l.run_id = ?1 ORDER BY l.family_id",
    )?;
    let raw = stmt
        .query_map(params![run], |r| {
            Ok((
                r.get::<_, Option<i64>>(0)?,
                r.get::<_, String>(1)?,
                r.get::<_, Option<String>>(2)?,
                r.get::<_, Option<String>>(3)?,
            ))
        })?
        .collect::<rusqlite::Result<Vec<_>>>()?;
    let mut out = Vec::new();
    for (family_id, aux_channel, json, freq_relation) in raw {
        let Some(json) = json else { continue };
        #[derive(serde::Deserialize)]
        struct Hist {
            edges_s: Vec<f64>,
            counts: Vec<f64>,
        }
        let h: Hist = serde_json::from_str(&json)
            .with_context(|| format!("witness_lags.lag_hist_json for {aux_channel}: not {{\"edges_s\":[..],\"counts\":[..]}}"))?;
        out.push(LagRow {
            family_id,
            aux_channel,
            edges_s: h.edges_s,
            counts: h.counts,
            freq_relation,
        });
    }
    Ok(out)
}

fn read_vetoes(conn: &Connection, run: i64) -> Result<Vec<VetoRow>> {
    let mut stmt = conn.prepare(
        "SELECT v.mode, v.family_id, v.round, coalesce(c.name, 'channel ' || v.aux_channel_id), v.aux_min_snr, \
         v.window_s, v.efficiency, v.deadtime, v.aux_hit_fraction, v.chance_p, v.false_alarm, \
         v.total_efficiency, v.total_deadtime, v.injections, v.injections_vetoed, v.injections_chance, \
         v.safety_binomial_p, v.safety_poisson_p, v.safety \
         FROM veto_rounds v LEFT JOIN channels c ON c.id = v.aux_channel_id WHERE v.run_id = ?1 \
         ORDER BY v.mode, v.family_id, v.round",
    )?;
    let rows = stmt
        .query_map(params![run], |r| {
            Ok(VetoRow {
                mode: r.get(0)?,
                family_id: r.get(1)?,
                round: r.get(2)?,
                aux_channel: r.get(3)?,
                aux_min_snr: r.get(4)?,
                window_s: r.get(5)?,
                efficiency: r.get(6)?,
                deadtime: r.get(7)?,
                aux_hit_fraction: r.get(8)?,
                chance_p: r.get(9)?,
                false_alarm: r.get(10)?,
                total_efficiency: r.get(11)?,
                total_deadtime: r.get(12)?,
                injections: r.get(13)?,
                injections_vetoed: r.get(14)?,
                injections_chance: r.get(15)?,
                safety_binomial_p: r.get(16)?,
                safety_poisson_p: r.get(17)?,
                safety: r.get(18)?,
            })
        })?
        .collect::<rusqlite::Result<Vec<_>>>()
        .context("reading veto_rounds")?;
    Ok(rows)
}

fn read_proposals(conn: &Connection, run: i64) -> Result<Vec<ProposalRow>> {
    let mut stmt = conn.prepare(
        "SELECT coalesce(c.name, 'channel ' || p.aux_channel_id), p.rounds, p.deadtime, p.covered_s, \
         p.efficiency, p.injections, p.injections_vetoed, p.injections_chance, p.safety_binomial_p, \
         p.safety_poisson_p, p.safety, p.state \
         FROM veto_proposals p LEFT JOIN channels c ON c.id = p.aux_channel_id WHERE p.run_id = ?1 \
         ORDER BY p.rowid",
    )?;
    let rows = stmt
        .query_map(params![run], |r| {
            Ok(ProposalRow {
                aux_channel: r.get(0)?,
                rounds: r.get(1)?,
                deadtime: r.get(2)?,
                covered_s: r.get(3)?,
                efficiency: r.get(4)?,
                injections: r.get(5)?,
                injections_vetoed: r.get(6)?,
                injections_chance: r.get(7)?,
                safety_binomial_p: r.get(8)?,
                safety_poisson_p: r.get(9)?,
                safety: r.get(10)?,
                state: r.get(11)?,
            })
        })?
        .collect::<rusqlite::Result<Vec<_>>>()
        .context("reading veto_proposals")?;
    Ok(rows)
}
