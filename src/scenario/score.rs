//! Scores of a catalogue against the second scenario's truth, stage by
//! stage: triggers (per-mechanism recall by true-SNR bin, measured / true
//! SNR, noise-trigger rate), families (ARI, homogeneity, completeness,
//! V-measure, purity, how each mechanism is spread over families, the
//! fraction of triggers answered), witnesses (the tool's best witness of
//! each mechanism's family vs the true one, with lag and efficiency) and
//! vetoes (which channels were proposed, and what they cut).
//!
//! # Matching rule
//! A target trigger matches a truth row (strain glitch or injection) when
//! its peak time lies in the row's extent widened by `margin_s` on each
//! side, and its frequency range `[f_low, f_high]` overlaps the row's
//! widened by `freq_slack` (fractional) on each side. A trigger matching
//! several rows goes to the one whose reference time is nearest. A row is
//! *found* when at least one trigger matches it; its measured SNR is the
//! largest matched trigger's. Only rows whose reference time lies in the
//! target's analysed time count. Unmatched triggers are *noise triggers*.
//!
//! # Lag sign
//! Truth lags are `t_aux − t_target`, the convention of
//! [`crate::coupling::lag`] too ([`COUPLING_LAG_SIGN`] = 1 says so where
//! the two meet).

use super::metrics::{adjusted_rand_index, homogeneity_completeness_v_measure, purity, Hcv};
use super::model::Mechanism;
use super::truth::{ChannelRow, TruthRow};
use crate::catalogue::{self, TriggerQuery, TriggerRow};
use crate::coupling::{Safety, VetoReport, WitnessReport};
use crate::segments::SegmentList;
use anyhow::{Context, Result};
use rusqlite::Connection;
use serde::Serialize;
use std::collections::{BTreeMap, HashMap};
use std::fmt::Write as _;
use std::path::Path;

/// Multiply the coupling module's lags by this to get `t_aux − t_target`
/// (it reports `t_aux − t_target` as well; see [`crate::coupling::lag`]).
pub const COUPLING_LAG_SIGN: f64 = 1.0;

/// True-SNR bins of the recall table: `[lo, hi)`.
pub const RECALL_BINS: [(f64, f64); 4] =
    [(6.0, 8.0), (8.0, 12.0), (12.0, 20.0), (20.0, f64::INFINITY)];

/// Matching parameters.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct MatchParams {
    /// Time margin on each side of a row's extent \[s\] (default 0.1).
    pub margin_s: f64,
    /// Fractional frequency slack on each side of a row's band (default 0.1).
    pub freq_slack: f64,
}

impl Default for MatchParams {
    fn default() -> Self {
        MatchParams {
            margin_s: 0.1,
            freq_slack: 0.1,
        }
    }
}

/// Which triggers matched which truth rows.
#[derive(Debug, Clone, Default)]
pub struct Matching {
    /// For each truth row: indices of its triggers.
    pub per_truth: Vec<Vec<usize>>,
    /// For each trigger: the truth row it matched.
    pub per_trigger: Vec<Option<usize>>,
}

/// Match triggers (any order) to truth rows (see the module docs).
pub fn match_triggers(truth: &[TruthRow], triggers: &[TriggerRow], p: &MatchParams) -> Matching {
    let mut order: Vec<usize> = (0..truth.len()).collect();
    order.sort_by(|&a, &b| truth[a].t_start_gps.total_cmp(&truth[b].t_start_gps));
    let longest = truth
        .iter()
        .map(|r| r.t_end_gps - r.t_start_gps)
        .fold(0.0, f64::max);
    let mut m = Matching {
        per_truth: vec![Vec::new(); truth.len()],
        per_trigger: vec![None; triggers.len()],
    };
    for (i, t) in triggers.iter().enumerate() {
        // Rows starting before t_peak + margin, from those that can still reach it.
        let lo = order.partition_point(|&k| truth[k].t_start_gps < t.t_peak - longest - p.margin_s);
        let hi = order.partition_point(|&k| truth[k].t_start_gps <= t.t_peak + p.margin_s);
        let best = order[lo..hi]
            .iter()
            .copied()
            .filter(|&k| {
                let r = &truth[k];
                t.t_peak >= r.t_start_gps - p.margin_s
                    && t.t_peak <= r.t_end_gps + p.margin_s
                    && t.f_low <= r.f_high_hz * (1.0 + p.freq_slack)
                    && t.f_high >= r.f_low_hz * (1.0 - p.freq_slack)
            })
            .min_by(|&a, &b| {
                (t.t_peak - truth[a].t_ref_gps)
                    .abs()
                    .total_cmp(&(t.t_peak - truth[b].t_ref_gps).abs())
            });
        if let Some(k) = best {
            m.per_trigger[i] = Some(k);
            m.per_truth[k].push(i);
        }
    }
    m
}

fn median(mut v: Vec<f64>) -> Option<f64> {
    if v.is_empty() {
        return None;
    }
    v.sort_by(f64::total_cmp);
    let n = v.len();
    Some(if !n.is_multiple_of(2) {
        v[n / 2]
    } else {
        0.5 * (v[n / 2 - 1] + v[n / 2])
    })
}

/// Recall in one true-SNR bin.
#[derive(Debug, Clone, Serialize)]
pub struct RecallBin {
    /// Bin lower edge (inclusive).
    pub snr_lo: f64,
    /// Bin upper edge (exclusive; infinite for the last).
    pub snr_hi: f64,
    /// Rows in analysed time.
    pub n: usize,
    /// Of which found.
    pub n_found: usize,
    /// Median measured / true SNR of the found ones (measured: the
    /// trigger's equivalent SNR, `snr_eq`).
    pub median_snr_ratio: Option<f64>,
}

impl RecallBin {
    /// `n_found / n` (None when empty).
    pub fn recall(&self) -> Option<f64> {
        (self.n > 0).then(|| self.n_found as f64 / self.n as f64)
    }
}

/// Trigger-level score of one mechanism.
#[derive(Debug, Clone, Serialize)]
pub struct MechanismRecall {
    /// Mechanism name.
    pub mechanism: String,
    /// Rows in analysed time.
    pub n: usize,
    /// Of which found.
    pub n_found: usize,
    /// Recall by true-SNR bin ([`RECALL_BINS`]).
    pub bins: Vec<RecallBin>,
    /// Recall at true SNR ≥ 10.
    pub recall_ge10: Option<f64>,
    /// Median measured / true SNR of found rows with true SNR ≥ 8.
    pub median_snr_ratio_ge8: Option<f64>,
    /// Mean number of triggers per found row (1 = one trigger per glitch).
    pub triggers_per_found: Option<f64>,
}

/// Triggers not matched to any truth row.
#[derive(Debug, Clone, Serialize)]
pub struct NoiseTriggers {
    /// Target analysed time \[s\].
    pub analysed_s: f64,
    /// Target triggers in all.
    pub n_triggers: usize,
    /// Unmatched triggers.
    pub n_unmatched: usize,
    /// Of which within 2 s of a truth row's extent (fragments, or matches
    /// missed by the frequency rule).
    pub n_unmatched_near: usize,
    /// Unmatched triggers farther than 2 s from every row, per hour of
    /// analysed time.
    pub far_per_hour: f64,
    /// The same for triggers with SNR ≥ 8.
    pub far_per_hour_snr8: f64,
}

/// Trigger-level scores.
#[derive(Debug, Clone, Serialize)]
pub struct TriggerScore {
    /// Per mechanism (glitches, then injections).
    pub mechanisms: Vec<MechanismRecall>,
    /// Noise triggers.
    pub noise: NoiseTriggers,
}

/// Score the target triggers against the truth.
pub fn trigger_score(
    truth: &[TruthRow],
    triggers: &[TriggerRow],
    m: &Matching,
    analysed: &SegmentList,
) -> TriggerScore {
    let mut mechanisms = Vec::new();
    for mech in Mechanism::ALL {
        let rows: Vec<usize> = (0..truth.len())
            .filter(|&k| truth[k].mechanism == mech.name() && analysed.contains(truth[k].t_ref_gps))
            .collect();
        // The trigger's equivalent SNR: its cluster's when one was
        // measured (issue 18), else its peak tile's.
        let measured = |k: usize| {
            m.per_truth[k]
                .iter()
                .map(|&i| triggers[i].snr_eq)
                .fold(f64::NEG_INFINITY, f64::max)
        };
        let found = |k: &usize| !m.per_truth[*k].is_empty();
        let bin = |lo: f64, hi: f64| {
            let inbin: Vec<usize> = rows
                .iter()
                .copied()
                .filter(|&k| truth[k].snr >= lo && truth[k].snr < hi)
                .collect();
            RecallBin {
                snr_lo: lo,
                snr_hi: hi,
                n: inbin.len(),
                n_found: inbin.iter().filter(|k| found(k)).count(),
                median_snr_ratio: median(
                    inbin
                        .iter()
                        .filter(|k| found(k))
                        .map(|&k| measured(k) / truth[k].snr)
                        .collect(),
                ),
            }
        };
        let ge10 = bin(10.0, f64::INFINITY);
        let ge8 = bin(8.0, f64::INFINITY);
        let n_found = rows.iter().filter(|k| found(k)).count();
        mechanisms.push(MechanismRecall {
            mechanism: mech.name().into(),
            n: rows.len(),
            n_found,
            bins: RECALL_BINS.iter().map(|&(lo, hi)| bin(lo, hi)).collect(),
            recall_ge10: ge10.recall(),
            median_snr_ratio_ge8: ge8.median_snr_ratio,
            triggers_per_found: (n_found > 0).then(|| {
                rows.iter().map(|&k| m.per_truth[k].len()).sum::<usize>() as f64 / n_found as f64
            }),
        });
    }
    // Noise triggers: unmatched, split by distance to the nearest extent.
    let mut ext: Vec<(f64, f64)> = truth.iter().map(|r| (r.t_start_gps, r.t_end_gps)).collect();
    ext.sort_by(|a, b| a.0.total_cmp(&b.0));
    let longest = ext.iter().map(|e| e.1 - e.0).fold(0.0, f64::max);
    let near = |t: f64| {
        let lo = ext.partition_point(|e| e.0 < t - 2.0 - longest);
        ext[lo..]
            .iter()
            .take_while(|e| e.0 <= t + 2.0)
            .any(|e| t >= e.0 - 2.0 && t <= e.1 + 2.0)
    };
    let unmatched: Vec<&TriggerRow> = triggers
        .iter()
        .zip(&m.per_trigger)
        .filter(|(_, k)| k.is_none())
        .map(|(t, _)| t)
        .collect();
    let n_near = unmatched.iter().filter(|t| near(t.t_peak)).count();
    let far: Vec<&&TriggerRow> = unmatched.iter().filter(|t| !near(t.t_peak)).collect();
    let hours = analysed.total() / 3600.0;
    let per_h = |n: usize| if hours > 0.0 { n as f64 / hours } else { 0.0 };
    TriggerScore {
        mechanisms,
        noise: NoiseTriggers {
            analysed_s: analysed.total(),
            n_triggers: triggers.len(),
            n_unmatched: unmatched.len(),
            n_unmatched_near: n_near,
            far_per_hour: per_h(far.len()),
            far_per_hour_snr8: per_h(far.iter().filter(|t| t.snr >= 8.0).count()),
        },
    }
}

/// A trigger's answer from the family stage.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub enum Answer {
    /// In this family.
    Family(i64),
    /// Explicitly unclassified, with the reason (e.g. `novel`, `quiet`).
    Unclassified(String),
}

/// Each target trigger's answer, read from `family_members` (trigger id →
/// answer): a family id; `novel = 1` as `Unclassified("novel")`; a
/// non-empty text column whose name contains `reason` (when the schema has
/// one) as `Unclassified(reason)`. Triggers without a row have no answer.
///
/// # Errors
/// SQL errors (a catalogue without families gives an empty map).
pub fn read_answers(conn: &Connection) -> Result<HashMap<i64, Answer>> {
    let cols: Vec<String> = conn
        .prepare("SELECT name FROM pragma_table_info('family_members')")?
        .query_map([], |r| r.get(0))?
        .collect::<rusqlite::Result<_>>()?;
    if cols.is_empty() {
        return Ok(HashMap::new());
    }
    let reason = cols.iter().find(|c| c.contains("reason"));
    let sql = format!(
        "SELECT trigger_id, family_id, novel, {} FROM family_members",
        reason.map_or("NULL".to_string(), |c| format!("\"{c}\""))
    );
    let mut out = HashMap::new();
    let mut st = conn.prepare(&sql)?;
    let rows = st.query_map([], |r| {
        Ok((
            r.get::<_, i64>(0)?,
            r.get::<_, Option<i64>>(1)?,
            r.get::<_, i64>(2)?,
            r.get::<_, Option<String>>(3)?,
        ))
    })?;
    for row in rows {
        let (id, fam, novel, why) = row?;
        let a = match (fam, novel, why) {
            (_, 1, _) => Some(Answer::Unclassified("novel".into())),
            (Some(f), _, _) => Some(Answer::Family(f)),
            (None, _, Some(w)) if !w.is_empty() => Some(Answer::Unclassified(w)),
            _ => None,
        };
        if let Some(a) = a {
            out.insert(id, a);
        }
    }
    Ok(out)
}

/// How one mechanism's triggers are spread over families.
#[derive(Debug, Clone, Serialize)]
pub struct MechanismFamilies {
    /// Mechanism name.
    pub mechanism: String,
    /// Its matched triggers with SNR ≥ the scoring floor.
    pub n: usize,
    /// Families holding ≥ 10% of them.
    pub n_families_10pct: usize,
    /// The family holding most of them.
    pub dominant_family: Option<i64>,
    /// Its share.
    pub dominant_share: f64,
    /// Share without a family.
    pub unclassified_share: f64,
}

/// What one family holds.
#[derive(Debug, Clone, Serialize)]
pub struct FamilyComposition {
    /// Family id.
    pub family_id: i64,
    /// Its scored triggers.
    pub n: usize,
    /// The mechanism most of them belong to.
    pub majority_mechanism: String,
    /// That mechanism's share.
    pub majority_share: f64,
}

/// Family-level scores.
#[derive(Debug, Clone, Serialize)]
pub struct FamilyScore {
    /// Matched target triggers with SNR ≥ this were scored.
    pub min_snr: f64,
    /// Of those, the number scored (all, with or without family).
    pub n_scored: usize,
    /// Of those, in a family.
    pub n_in_family: usize,
    /// ARI over all scored triggers (no family = one extra cluster).
    pub ari_all: f64,
    /// Homogeneity/completeness/V over all scored triggers (same convention).
    pub hcv_all: Hcv,
    /// ARI over scored triggers in a family.
    pub ari_in_family: f64,
    /// Homogeneity/completeness/V over scored triggers in a family.
    pub hcv_in_family: Hcv,
    /// Purity over scored triggers in a family.
    pub purity_in_family: f64,
    /// Target triggers (all are above the scan threshold).
    pub n_target_triggers: usize,
    /// Fraction of them in a family or explicitly unclassified with a reason.
    pub answered_fraction: f64,
    /// Per mechanism.
    pub mechanisms: Vec<MechanismFamilies>,
    /// Per family, by id.
    pub families: Vec<FamilyComposition>,
}

/// Score a trigger → answer map against the truth.
pub fn family_score(
    truth: &[TruthRow],
    triggers: &[TriggerRow],
    m: &Matching,
    answers: &HashMap<i64, Answer>,
    min_snr: f64,
) -> FamilyScore {
    let mech_index = |name: &str| Mechanism::ALL.iter().position(|x| x.name() == name);
    let (mut ta, mut pa, mut tf, mut pf) = (Vec::new(), Vec::new(), Vec::new(), Vec::new());
    let mut per: BTreeMap<usize, (usize, usize, HashMap<i64, usize>)> = BTreeMap::new();
    for (i, t) in triggers.iter().enumerate() {
        let Some(k) = m.per_trigger[i] else { continue };
        if t.snr < min_snr {
            continue;
        }
        let Some(c) = mech_index(&truth[k].mechanism) else {
            continue;
        };
        let fam = match answers.get(&t.id) {
            Some(Answer::Family(f)) => Some(*f),
            _ => None,
        };
        ta.push(c as i64);
        pa.push(fam.unwrap_or(-1));
        let e = per.entry(c).or_default();
        e.0 += 1;
        if let Some(f) = fam {
            tf.push(c as i64);
            pf.push(f);
            *e.2.entry(f).or_default() += 1;
        } else {
            e.1 += 1;
        }
    }
    let answered = triggers
        .iter()
        .filter(|t| answers.contains_key(&t.id))
        .count();
    let mut by_family: BTreeMap<i64, HashMap<usize, usize>> = BTreeMap::new();
    for (&c, &f) in tf.iter().zip(&pf) {
        *by_family
            .entry(f)
            .or_default()
            .entry(c as usize)
            .or_default() += 1;
    }
    let families = by_family
        .into_iter()
        .map(|(f, counts)| {
            let n: usize = counts.values().sum();
            let (&c, &k) = counts
                .iter()
                .max_by_key(|(c, k)| (**k, std::cmp::Reverse(**c)))
                .expect("a family with members");
            FamilyComposition {
                family_id: f,
                n,
                majority_mechanism: Mechanism::ALL[c].name().into(),
                majority_share: k as f64 / n as f64,
            }
        })
        .collect();
    let mechanisms = per
        .into_iter()
        .map(|(c, (n, n_none, fams))| {
            let dom = fams.iter().max_by_key(|(f, k)| (**k, -**f));
            MechanismFamilies {
                mechanism: Mechanism::ALL[c].name().into(),
                n,
                n_families_10pct: fams
                    .values()
                    .filter(|&&k| k as f64 >= 0.1 * n as f64)
                    .count(),
                dominant_family: dom.map(|(f, _)| *f),
                dominant_share: dom.map_or(0.0, |(_, k)| *k as f64 / n as f64),
                unclassified_share: n_none as f64 / n.max(1) as f64,
            }
        })
        .collect();
    FamilyScore {
        min_snr,
        n_scored: ta.len(),
        n_in_family: tf.len(),
        ari_all: adjusted_rand_index(&ta, &pa),
        hcv_all: homogeneity_completeness_v_measure(&ta, &pa, 1.0),
        ari_in_family: adjusted_rand_index(&tf, &pf),
        hcv_in_family: homogeneity_completeness_v_measure(&tf, &pf, 1.0),
        purity_in_family: purity(&tf, &pf),
        n_target_triggers: triggers.len(),
        answered_fraction: answered as f64 / triggers.len().max(1) as f64,
        mechanisms,
        families,
    }
}

/// The tool's witness for one mechanism against the truth.
#[derive(Debug, Clone, Serialize)]
pub struct WitnessScore {
    /// Mechanism name.
    pub mechanism: String,
    /// The true witness channel (None: unwitnessed).
    pub true_channel: Option<String>,
    /// True lag `t_aux − t_target` \[s\].
    pub true_lag_s: Option<f64>,
    /// Fraction of the mechanism's rows with an aux counterpart.
    pub true_efficiency: f64,
    /// The family holding most of the mechanism's triggers.
    pub family: Option<i64>,
    /// The tool's best witness of that family.
    pub found_channel: Option<String>,
    /// Its false-alarm probability over every channel compared
    /// (`false_alarm_any`).
    pub false_alarm: Option<f64>,
    /// Its efficiency (fraction of the family's triggers).
    pub efficiency: Option<f64>,
    /// Its median lag converted to `t_aux − t_target` \[s\].
    pub lag_s: Option<f64>,
    /// Rank (1 = best) of the true channel among the family's witness rows.
    pub true_channel_rank: Option<usize>,
    /// Whether the best witness is the true one (for unwitnessed
    /// mechanisms: whether no witness was beyond chance).
    pub correct: bool,
}

/// Compare the tool's witness results per family with the truth.
pub fn witness_score(
    truth: &[TruthRow],
    fam: &FamilyScore,
    report: &WitnessReport,
) -> Vec<WitnessScore> {
    Mechanism::ALL
        .iter()
        .map(|mech| {
            let rows: Vec<&TruthRow> = truth
                .iter()
                .filter(|r| r.mechanism == mech.name())
                .collect();
            let true_channel = rows.iter().find_map(|r| r.witness_channel.clone());
            let true_lag_s = rows.iter().find_map(|r| r.lag_aux_minus_target_s);
            let true_efficiency = rows.iter().filter(|r| r.witness_channel.is_some()).count()
                as f64
                / rows.len().max(1) as f64;
            let family = fam
                .mechanisms
                .iter()
                .find(|m| m.mechanism == mech.name())
                .and_then(|m| m.dominant_family);
            let best: Vec<_> = report
                .best
                .iter()
                .filter(|w| family.is_some() && w.family_id == family)
                .collect();
            let top = best.first();
            let lag_s = top.and_then(|w| {
                report
                    .lags
                    .iter()
                    .find(|l| l.family_id == family && l.aux_channel == w.aux_channel)
                    .and_then(|l| l.lag_median_s)
                    .map(|x| COUPLING_LAG_SIGN * x)
            });
            let true_channel_rank = true_channel
                .as_ref()
                .and_then(|c| best.iter().position(|w| &w.aux_channel == c).map(|i| i + 1));
            let correct = match (&true_channel, top) {
                (Some(c), Some(w)) => &w.aux_channel == c,
                (Some(_), None) => false,
                (None, Some(w)) => !w.beyond_chance,
                (None, None) => true,
            };
            WitnessScore {
                mechanism: mech.name().into(),
                true_channel,
                true_lag_s,
                true_efficiency,
                family,
                found_channel: top.map(|w| w.aux_channel.clone()),
                false_alarm: top.map(|w| w.false_alarm_any),
                efficiency: top.map(|w| w.efficiency),
                lag_s,
                true_channel_rank,
                correct,
            }
        })
        .collect()
}

/// One veto round, classified.
#[derive(Debug, Clone, Serialize)]
pub struct VetoRoundScore {
    /// `all` or `family`.
    pub mode: String,
    /// Family (mode `family`).
    pub family_id: Option<i64>,
    /// Round number.
    pub round: u32,
    /// Channel.
    pub channel: String,
    /// Its class in `channels.csv`.
    pub class: String,
    /// Mechanism it truly witnesses.
    pub witnesses: Option<String>,
    /// Majority mechanism of the round's family (mode `family`).
    pub family_mechanism: Option<String>,
    /// Whether the channel truly witnesses what the round vetoes: any
    /// mechanism (mode `all`) or the family's majority mechanism.
    pub right_channel: bool,
    /// The round's false-alarm probability over every channel compared.
    pub false_alarm: f64,
    /// The tool's safety state: `safe`, `unsafe` or `unchecked`.
    pub safety: String,
    /// Proposed: its safety was checked against the injections and passed
    /// (a round that is unsafe, or whose safety could not be checked, is
    /// not put forward).
    pub proposed: bool,
}

/// Veto-level scores.
#[derive(Debug, Clone, Serialize)]
pub struct VetoScore {
    /// Every round.
    pub rounds: Vec<VetoRoundScore>,
    /// Proposed rounds from true witness channels.
    pub n_proposed_witness: usize,
    /// Proposed rounds from unrelated or frequent channels.
    pub n_proposed_unrelated: usize,
    /// Proposed rounds whose channel does not witness what they veto
    /// (unrelated channels, or a witness of another mechanism).
    pub n_proposed_wrong: usize,
    /// Whether the channel that records the injections was proposed.
    pub unsafe_proposed: bool,
    /// Fraction of injections inside the proposed vetoes' segments.
    pub injections_vetoed: f64,
    /// Per mechanism: fraction of rows (in analysed time) whose reference
    /// time lies inside the proposed vetoes' segments.
    pub vetoed_by_mechanism: Vec<(String, f64)>,
    /// Union of the proposed vetoes' segments \[s\].
    pub vetoed_s: f64,
}

/// Classify the veto rounds with the channel table (and the families'
/// majority mechanisms) and measure what the proposed vetoes cut.
pub fn veto_score(
    truth: &[TruthRow],
    channels: &[ChannelRow],
    injections: &[f64],
    analysed: &SegmentList,
    report: &VetoReport,
    families: Option<&FamilyScore>,
) -> VetoScore {
    let class = |c: &str| channels.iter().find(|r| r.name == c);
    let rounds: Vec<VetoRoundScore> = report
        .rounds
        .iter()
        .map(|r| {
            let ch = class(&r.aux_channel);
            let witnesses = ch.and_then(|c| c.witnesses.clone());
            let family_mechanism = r.family_id.and_then(|f| {
                families?
                    .families
                    .iter()
                    .find(|c| c.family_id == f)
                    .map(|c| c.majority_mechanism.clone())
            });
            let is_witness = ch.is_some_and(|c| c.class == "witness");
            let right_channel = match (&r.family_id, &family_mechanism) {
                (None, _) => is_witness,
                (Some(_), Some(m)) => is_witness && witnesses.as_ref() == Some(m),
                (Some(_), None) => false,
            };
            VetoRoundScore {
                mode: r.mode.clone(),
                family_id: r.family_id,
                round: r.round,
                channel: r.aux_channel.clone(),
                class: ch.map_or("unknown".into(), |c| c.class.clone()),
                witnesses,
                family_mechanism,
                right_channel,
                false_alarm: r.false_alarm,
                safety: r.safety.as_str().into(),
                proposed: r.safety == Safety::Safe,
            }
        })
        .collect();
    let mut cut = SegmentList::new();
    for r in report.rounds.iter().filter(|r| r.safety != Safety::Unsafe) {
        cut = cut.union(&r.segments);
    }
    let n_proposed =
        |f: &dyn Fn(&VetoRoundScore) -> bool| rounds.iter().filter(|r| r.proposed && f(r)).count();
    let vetoed_by_mechanism = Mechanism::ALL
        .iter()
        .map(|m| {
            let rows: Vec<&TruthRow> = truth
                .iter()
                .filter(|r| r.mechanism == m.name() && analysed.contains(r.t_ref_gps))
                .collect();
            let n = rows.iter().filter(|r| cut.contains(r.t_ref_gps)).count();
            (m.name().to_string(), n as f64 / rows.len().max(1) as f64)
        })
        .collect();
    let inj_in: Vec<f64> = injections
        .iter()
        .copied()
        .filter(|&t| analysed.contains(t))
        .collect();
    VetoScore {
        n_proposed_witness: n_proposed(&|r| r.class == "witness"),
        n_proposed_unrelated: n_proposed(&|r| r.class == "unrelated" || r.class == "frequent"),
        n_proposed_wrong: n_proposed(&|r| !r.right_channel),
        unsafe_proposed: n_proposed(&|r| r.class == "unsafe") > 0,
        injections_vetoed: inj_in.iter().filter(|&&t| cut.contains(t)).count() as f64
            / inj_in.len().max(1) as f64,
        vetoed_by_mechanism,
        vetoed_s: cut.total(),
        rounds,
    }
}

/// Every score of one catalogue.
#[derive(Debug, Clone, Serialize)]
pub struct ScenarioScore {
    /// Triggers.
    pub triggers: TriggerScore,
    /// Families (None when the catalogue has none).
    pub families: Option<FamilyScore>,
    /// Witnesses (empty without a witness report).
    pub witnesses: Vec<WitnessScore>,
    /// Vetoes (None without a veto report).
    pub vetoes: Option<VetoScore>,
}

/// Options of [`score_catalogue`].
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct ScoreParams {
    /// Matching rule.
    pub matching: MatchParams,
    /// Families are scored over matched triggers with SNR ≥ this (default 8).
    pub family_min_snr: f64,
}

impl Default for ScoreParams {
    fn default() -> Self {
        ScoreParams {
            matching: MatchParams::default(),
            family_min_snr: 8.0,
        }
    }
}

/// Score a catalogue against the scenario written in `scenario_dir`
/// (`truth.csv`, `channels.csv`, `injections.csv`), with the tool's
/// witness and veto results when given.
///
/// # Errors
/// Missing or bad scenario files, a catalogue without the target channel,
/// or SQL errors.
pub fn score_catalogue(
    conn: &Connection,
    scenario_dir: &Path,
    witnesses: Option<&WitnessReport>,
    vetoes: Option<&VetoReport>,
    p: &ScoreParams,
) -> Result<ScenarioScore> {
    let truth = super::truth::read_truth(&scenario_dir.join(super::TRUTH_CSV))?;
    let channels = super::truth::read_channels(&scenario_dir.join(super::CHANNELS_CSV))?;
    let injections = crate::io::read_injections(&scenario_dir.join(super::INJECTIONS_CSV))?;
    let target = channels
        .iter()
        .find(|c| c.class == "target")
        .context("channels.csv has no target channel")?;
    let triggers = catalogue::query_triggers(
        conn,
        &TriggerQuery {
            channel: Some(target.name.clone()),
            ..TriggerQuery::default()
        },
    )?;
    let analysed = catalogue::analysed_segments(conn, &target.name)?;
    let m = match_triggers(&truth, &triggers, &p.matching);
    let ts = trigger_score(&truth, &triggers, &m, &analysed);
    let answers = read_answers(conn)?;
    let families = (!answers.is_empty())
        .then(|| family_score(&truth, &triggers, &m, &answers, p.family_min_snr));
    let witnesses = match (witnesses, &families) {
        (Some(w), Some(f)) => witness_score(&truth, f, w),
        _ => Vec::new(),
    };
    let vetoes = vetoes.map(|v| {
        veto_score(
            &truth,
            &channels,
            &injections,
            &analysed,
            v,
            families.as_ref(),
        )
    });
    Ok(ScenarioScore {
        triggers: ts,
        families,
        witnesses,
        vetoes,
    })
}

fn opt(v: Option<f64>, digits: usize) -> String {
    v.map_or("-".into(), |x| format!("{x:.digits$}"))
}

impl ScenarioScore {
    /// The scores as plain-text tables.
    pub fn render(&self) -> String {
        let mut s = String::new();
        let _ = writeln!(
            s,
            "triggers: recall by true SNR (found/injected in analysed time), median measured (equivalent) / true SNR"
        );
        let _ = writeln!(
            s,
            "  {:<10} {:>9} {:>9} {:>9} {:>9} {:>7} {:>9} {:>8}",
            "mechanism", "6-8", "8-12", "12-20", ">=20", "r>=10", "SNR m/t", "trig/gl"
        );
        for m in &self.triggers.mechanisms {
            let cells: Vec<String> = m
                .bins
                .iter()
                .map(|b| format!("{}/{}", b.n_found, b.n))
                .collect();
            let _ = writeln!(
                s,
                "  {:<10} {:>9} {:>9} {:>9} {:>9} {:>7} {:>9} {:>8}",
                m.mechanism,
                cells[0],
                cells[1],
                cells[2],
                cells[3],
                opt(m.recall_ge10, 2),
                opt(m.median_snr_ratio_ge8, 2),
                opt(m.triggers_per_found, 2)
            );
        }
        let n = &self.triggers.noise;
        let _ = writeln!(
            s,
            "  noise triggers: {} of {} unmatched ({} within 2 s of a glitch); far from every glitch {:.1}/h, {:.1}/h at SNR >= 8 ({:.2} h analysed)",
            n.n_unmatched,
            n.n_triggers,
            n.n_unmatched_near,
            n.far_per_hour,
            n.far_per_hour_snr8,
            n.analysed_s / 3600.0
        );
        if let Some(f) = &self.families {
            let _ = writeln!(
                s,
                "families (matched triggers with SNR >= {}): {} scored, {} in a family",
                f.min_snr, f.n_scored, f.n_in_family
            );
            let _ = writeln!(
                s,
                "  all scored (no family = one cluster): ARI {:.3}, homogeneity {:.3}, completeness {:.3}, V {:.3}",
                f.ari_all, f.hcv_all.homogeneity, f.hcv_all.completeness, f.hcv_all.v_measure
            );
            let _ = writeln!(
                s,
                "  in a family: ARI {:.3}, homogeneity {:.3}, completeness {:.3}, V {:.3}, purity {:.3}",
                f.ari_in_family,
                f.hcv_in_family.homogeneity,
                f.hcv_in_family.completeness,
                f.hcv_in_family.v_measure,
                f.purity_in_family
            );
            let _ = writeln!(
                s,
                "  answered (in a family or unclassified with a reason): {:.3} of {} target triggers",
                f.answered_fraction, f.n_target_triggers
            );
            let fams: Vec<String> = f
                .families
                .iter()
                .map(|c| {
                    format!(
                        "{}: {} {} ({:.2})",
                        c.family_id, c.n, c.majority_mechanism, c.majority_share
                    )
                })
                .collect();
            let _ = writeln!(
                s,
                "  families (id: n majority (share)): {}",
                fams.join("; ")
            );
            for m in &f.mechanisms {
                let _ = writeln!(
                    s,
                    "  {:<10} n {:>4}: {} families >= 10%, dominant {} holds {:.2}, no family {:.2}",
                    m.mechanism,
                    m.n,
                    m.n_families_10pct,
                    m.dominant_family.map_or("-".into(), |f| f.to_string()),
                    m.dominant_share,
                    m.unclassified_share
                );
            }
        }
        if !self.witnesses.is_empty() {
            let _ = writeln!(
                s,
                "witnesses (best witness of each mechanism's dominant family; lag = t_aux - t_target):"
            );
            for w in &self.witnesses {
                let _ = writeln!(
                    s,
                    "  {:<10} true {:<20} lag {:>7} eff {:.2} | found {:<20} false alarm {:>8} eff {:>5} lag {:>8} rank of true {:>2} {}",
                    w.mechanism,
                    w.true_channel.as_deref().unwrap_or("(none)"),
                    opt(w.true_lag_s, 3),
                    w.true_efficiency,
                    w.found_channel.as_deref().unwrap_or("-"),
                    w.false_alarm.map_or("-".into(), |p| format!("{p:.1e}")),
                    opt(w.efficiency, 2),
                    opt(w.lag_s, 4),
                    w.true_channel_rank.map_or("-".into(), |r| r.to_string()),
                    if w.correct { "ok" } else { "WRONG" }
                );
            }
        }
        if let Some(v) = &self.vetoes {
            let _ = writeln!(
                s,
                "vetoes: {} rounds; proposed from true witnesses {}, from unrelated/frequent channels {}, for what the channel does not witness {}, injection-recording channel proposed: {}",
                v.rounds.len(),
                v.n_proposed_witness,
                v.n_proposed_unrelated,
                v.n_proposed_wrong,
                v.unsafe_proposed
            );
            let _ = writeln!(
                s,
                "  proposed vetoes cut {:.0} s, {:.3} of injections; by mechanism: {}",
                v.vetoed_s,
                v.injections_vetoed,
                v.vetoed_by_mechanism
                    .iter()
                    .map(|(m, f)| format!("{m} {f:.2}"))
                    .collect::<Vec<_>>()
                    .join(", ")
            );
            for r in &v.rounds {
                let _ = writeln!(
                    s,
                    "  {:<6} fam {:>3} ({:<9}) round {:>2} {:<20} {:<9} witnesses {:<9} false alarm {:>8.1e} {:<9} {:<8} {}",
                    r.mode,
                    r.family_id.map_or("-".into(), |f| f.to_string()),
                    r.family_mechanism.as_deref().unwrap_or("-"),
                    r.round,
                    r.channel,
                    r.class,
                    r.witnesses.as_deref().unwrap_or("-"),
                    r.false_alarm,
                    r.safety,
                    if r.proposed { "proposed" } else { "-" },
                    if r.right_channel { "" } else { "wrong channel" }
                );
            }
        }
        s
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn row(id: u32, mech: &str, t: f64, hw: f64, f: (f64, f64), snr: f64) -> TruthRow {
        TruthRow {
            id,
            mechanism: mech.into(),
            train_id: None,
            train_size: 1,
            t_ref_gps: t,
            t_start_gps: t - hw,
            t_end_gps: t + hw,
            f_low_hz: f.0,
            f_high_hz: f.1,
            snr,
            noise_gain: 1.0,
            amplitude: 1.0,
            ground_motion: None,
            witness_channel: None,
            lag_aux_minus_target_s: None,
            witness_snr: None,
            witness_f_ratio: None,
            waveform: String::new(),
        }
    }

    fn trig(id: i64, t: f64, f: (f64, f64), snr: f64) -> TriggerRow {
        TriggerRow {
            id,
            channel: "QM4:STRAIN".into(),
            t_peak: t,
            t_start: t - 0.01,
            t_end: t + 0.01,
            f_peak: 0.5 * (f.0 + f.1),
            f_low: f.0,
            f_high: f.1,
            snr,
            q: None,
            energy: 0.0,
            snr_eq: snr,
        }
    }

    #[test]
    fn matching_uses_time_and_frequency_and_nearest_reference() {
        let truth = vec![
            row(0, "pulse", 100.0, 0.05, (100.0, 200.0), 10.0),
            row(1, "arch", 100.9, 1.0, (8.0, 40.0), 9.0),
            row(2, "tone", 200.0, 0.2, (400.0, 420.0), 15.0),
        ];
        let trigs = vec![
            trig(1, 100.02, (120.0, 180.0), 9.0),  // pulse
            trig(2, 100.3, (20.0, 35.0), 7.0),     // arch (time inside, freq arch)
            trig(3, 200.25, (405.0, 415.0), 14.0), // tone, within margin
            trig(4, 200.0, (900.0, 1000.0), 6.0),  // wrong frequency: noise
            trig(5, 300.0, (50.0, 60.0), 6.0),     // nothing there: noise
            trig(6, 100.08, (30.0, 150.0), 8.0),   // overlaps both; pulse is nearer
        ];
        let m = match_triggers(&truth, &trigs, &MatchParams::default());
        assert_eq!(
            m.per_trigger,
            vec![Some(0), Some(1), Some(2), None, None, Some(0)]
        );
        let analysed = SegmentList::single(0.0, 3600.0);
        let s = trigger_score(&truth, &trigs, &m, &analysed);
        let pulse = &s.mechanisms[0];
        assert_eq!((pulse.n, pulse.n_found), (1, 1));
        assert_eq!(pulse.triggers_per_found, Some(2.0));
        assert_eq!(pulse.median_snr_ratio_ge8, Some(0.9));
        assert_eq!(s.noise.n_unmatched, 2);
        assert_eq!(s.noise.n_unmatched_near, 1);
        assert!((s.noise.far_per_hour - 1.0).abs() < 1e-12);
    }

    #[test]
    fn family_scores_count_unclassified_as_one_cluster() {
        let truth = vec![
            row(0, "pulse", 10.0, 0.05, (100.0, 200.0), 10.0),
            row(1, "pulse", 20.0, 0.05, (100.0, 200.0), 10.0),
            row(2, "tone", 30.0, 0.2, (400.0, 420.0), 10.0),
            row(3, "tone", 40.0, 0.2, (400.0, 420.0), 10.0),
        ];
        let trigs: Vec<TriggerRow> = truth
            .iter()
            .enumerate()
            .map(|(i, r)| trig(i as i64 + 1, r.t_ref_gps, (r.f_low_hz, r.f_high_hz), 9.0))
            .collect();
        let m = match_triggers(&truth, &trigs, &MatchParams::default());
        let answers: HashMap<i64, Answer> = [
            (1, Answer::Family(7)),
            (2, Answer::Family(7)),
            (3, Answer::Family(8)),
            (4, Answer::Unclassified("novel".into())),
        ]
        .into_iter()
        .collect();
        let f = family_score(&truth, &trigs, &m, &answers, 8.0);
        assert_eq!((f.n_scored, f.n_in_family), (4, 3));
        assert!((f.ari_in_family - 1.0).abs() < 1e-12);
        assert!(f.ari_all < 1.0);
        assert_eq!(f.answered_fraction, 1.0);
        let tone = f.mechanisms.iter().find(|m| m.mechanism == "tone").unwrap();
        assert_eq!(tone.unclassified_share, 0.5);
    }
}
