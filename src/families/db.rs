//! Catalogue adapter of families: every SQL statement of the stage. Reads
//! target triggers and stored fingerprints, runs a clustering
//! ([`cluster_catalogue`], one transaction, in named steps), places new
//! triggers ([`assign_new`]), labels families and lists them. The numerics
//! are in [`super::model`], the identity rules in [`super::lineage`].

use super::features::{
    blob_to_f32, f32_to_blob, fingerprint, EnergyMapSource, FEATURE_VERSION, MAP_LEN, N_SCALARS,
    N_SPANS,
};
use super::lineage::{self, EventKind, FamilyStatus, Lineage};
use super::model::{argmax, component_groups, fit_model, group_resp, median, FamilyModel};
use super::{
    AssignReport, ClusterParams, ClusterReport, FamilyEvent, FamilySummary, Fingerprints,
    LabelChange,
};
use crate::catalogue::{from_ns, now_utc};
use crate::trigger::Trigger;
use anyhow::{Context, Result};
use rayon::prelude::*;
use rusqlite::types::{FromSql, FromSqlError, FromSqlResult, ToSql, ToSqlOutput, ValueRef};
use rusqlite::{params, Connection, OptionalExtension, Transaction};
use std::collections::{BTreeMap, HashMap};

impl ToSql for EventKind {
    fn to_sql(&self) -> rusqlite::Result<ToSqlOutput<'_>> {
        Ok(ToSqlOutput::from(self.as_str()))
    }
}

impl FromSql for EventKind {
    fn column_result(value: ValueRef<'_>) -> FromSqlResult<Self> {
        let s = value.as_str()?;
        EventKind::parse(s)
            .ok_or_else(|| FromSqlError::Other(format!("unknown family event kind {s:?}").into()))
    }
}

impl ToSql for FamilyStatus {
    fn to_sql(&self) -> rusqlite::Result<ToSqlOutput<'_>> {
        Ok(ToSqlOutput::from(self.as_str()))
    }
}

impl FromSql for FamilyStatus {
    fn column_result(value: ValueRef<'_>) -> FromSqlResult<Self> {
        let s = value.as_str()?;
        FamilyStatus::parse(s)
            .ok_or_else(|| FromSqlError::Other(format!("unknown family status {s:?}").into()))
    }
}

/// A target trigger as read from the catalogue.
#[derive(Debug, Clone)]
pub(crate) struct Row {
    pub(crate) id: i64,
    pub(crate) channel: String,
    pub(crate) trig: Trigger,
}

impl Row {
    /// The catalogue's trigger row mapping (`catalogue::TriggerRow`), for
    /// `SELECT t.id, c.name, t.t_peak_ns, ... t.energy`.
    fn from_sql(r: &rusqlite::Row) -> rusqlite::Result<Row> {
        let t = crate::catalogue::TriggerRow::from_row(r)?;
        Ok(Row {
            id: t.id,
            trig: t.to_trigger(),
            channel: t.channel,
        })
    }
}

/// Target triggers with `min_snr ≤ SNR < max_snr`, by id; with
/// `only_unassigned`, those without a `family_members` row.
fn target_triggers_in(
    conn: &Connection,
    min_snr: f64,
    max_snr: f64,
    only_unassigned: bool,
) -> Result<Vec<Row>> {
    let sql = format!(
        "SELECT t.id, c.name, t.t_peak_ns, t.t_start_ns, t.t_end_ns, t.f_peak_hz, t.f_low_hz, \
         t.f_high_hz, t.snr, t.q, t.energy, COALESCE(t.snr_eq, t.snr) FROM triggers t JOIN channels c ON c.id = t.channel_id \
         WHERE c.role = 'target' AND t.snr >= ?1 AND t.snr < ?2 {} ORDER BY t.id",
        if only_unassigned {
            "AND NOT EXISTS (SELECT 1 FROM family_members m WHERE m.trigger_id = t.id)"
        } else {
            ""
        }
    );
    let mut st = conn.prepare(&sql)?;
    let rows = st.query_map([min_snr, max_snr], Row::from_sql)?;
    Ok(rows.collect::<rusqlite::Result<_>>()?)
}

fn target_triggers(conn: &Connection, min_snr: f64, only_unassigned: bool) -> Result<Vec<Row>> {
    target_triggers_in(conn, min_snr, f64::INFINITY, only_unassigned)
}

/// Split off the rows of channels without raw data (triggers imported
/// without it have no fingerprint); their counts per channel go to
/// `skipped`.
fn with_data(
    rows: Vec<Row>,
    src: &dyn EnergyMapSource,
    skipped: &mut Vec<(String, usize)>,
) -> Vec<Row> {
    let (keep, without): (Vec<Row>, Vec<Row>) =
        rows.into_iter().partition(|r| src.has_data(&r.channel));
    for r in without {
        match skipped.iter_mut().find(|(c, _)| *c == r.channel) {
            Some((_, n)) => *n += 1,
            None => skipped.push((r.channel, 1)),
        }
    }
    keep
}

/// Fingerprints of `rows`, computing (in parallel) and storing those missing
/// or of another feature version. Returns (maps, scalars) per row and the
/// number computed. With `need_maps` false the maps are stored but not
/// returned (empty): a clustering vector without map components needs only
/// the scalars, and a million maps would take 4 GiB.
fn ensure_features(
    tx: &Transaction,
    rows: &[Row],
    src: &dyn EnergyMapSource,
    need_maps: bool,
) -> Result<(Fingerprints, usize)> {
    let mut have: Vec<Option<(Vec<f32>, Vec<f32>)>> = Vec::with_capacity(rows.len());
    {
        let mut st = tx.prepare(if need_maps {
            "SELECT version, scalars, maps FROM features WHERE trigger_id = ?1"
        } else {
            "SELECT version, scalars, x'' FROM features WHERE trigger_id = ?1"
        })?;
        for r in rows {
            let got: Option<(i64, Vec<u8>, Vec<u8>)> = st
                .query_row([r.id], |row| Ok((row.get(0)?, row.get(1)?, row.get(2)?)))
                .optional()?;
            have.push(match got {
                Some((v, s, m)) if v == FEATURE_VERSION => {
                    let m =
                        blob_to_f32(&m).with_context(|| format!("features of trigger {}", r.id))?;
                    let s =
                        blob_to_f32(&s).with_context(|| format!("features of trigger {}", r.id))?;
                    let maps_ok = m.len() == N_SPANS * MAP_LEN || !need_maps;
                    (maps_ok && s.len() == N_SCALARS).then_some((m, s))
                }
                _ => None,
            });
        }
    }
    let todo: Vec<usize> = (0..rows.len()).filter(|&i| have[i].is_none()).collect();
    let mut st = tx.prepare(
        "INSERT OR REPLACE INTO features (trigger_id, version, maps, scalars) VALUES (?1, ?2, ?3, ?4)",
    )?;
    // In chunks, so at most one chunk of maps is held when they are not needed.
    type Computed = Result<(usize, Vec<f32>, Vec<f32>)>;
    for chunk in todo.chunks(FEATURE_CHUNK) {
        let computed: Vec<Computed> = chunk
            .par_iter()
            .map(|&i| {
                let fp = fingerprint(&rows[i].trig, &rows[i].channel, src)
                    .with_context(|| format!("fingerprint of trigger {}", rows[i].id))?;
                Ok((i, fp.maps, fp.scalars))
            })
            .collect();
        for c in computed {
            let (i, m, s) = c?;
            st.execute(params![
                rows[i].id,
                FEATURE_VERSION,
                f32_to_blob(&m),
                f32_to_blob(&s)
            ])?;
            have[i] = Some((if need_maps { m } else { Vec::new() }, s));
        }
    }
    Ok((
        have.into_iter().map(|h| h.expect("filled")).collect(),
        todo.len(),
    ))
}

/// Fingerprints computed (in parallel) before they are stored.
const FEATURE_CHUNK: usize = 4096;

/// Compute and store fingerprints of every target trigger with SNR ≥
/// `min_snr` that lacks a current-version one (one transaction). Returns
/// the number computed.
pub fn compute_features(
    conn: &mut Connection,
    min_snr: f64,
    src: &dyn EnergyMapSource,
) -> Result<usize> {
    let tx = conn.transaction()?;
    let rows = target_triggers(&tx, min_snr, false)?;
    let (_, n) = ensure_features(&tx, &rows, src, false)?;
    tx.commit()?;
    Ok(n)
}

/// Cluster every target trigger with SNR ≥ `p.min_snr` (computing missing
/// fingerprints from `src`), keep family ids stable against the previous
/// run, and store memberships and the model — all in one transaction.
///
/// Steps (private functions of this module): read the triggers and their
/// fingerprints (`ensure_features`), fit and group (`fit_and_group`), read
/// the previous memberships (`active_memberships`), record the run
/// (`insert_run`), link ids ([`lineage::link`]) and store families and
/// events (`store_lineage`), replace the memberships (`store_memberships`),
/// store the model.
///
/// # Errors
/// Invalid parameters ([`ClusterParams::check`]), fewer than 2 triggers,
/// unreadable data for a missing fingerprint, SQLite errors.
pub fn cluster_catalogue(
    conn: &mut Connection,
    p: &ClusterParams,
    src: &dyn EnergyMapSource,
) -> Result<ClusterReport> {
    p.check()?;
    let tx = conn.transaction_with_behavior(rusqlite::TransactionBehavior::Immediate)?;
    let mut without_data = Vec::new();
    let rows = with_data(
        target_triggers(&tx, p.min_snr, false)?,
        src,
        &mut without_data,
    );
    let need_maps = p.n_map_components > 0;
    let (fps, n_computed) = ensure_features(&tx, &rows, src, need_maps)?;
    let (mut model, fit) = fit_and_group(&fps, p)?;
    let previous = active_memberships(&tx)?;
    let pins = active_pins(&tx)?;
    let run_id = insert_run(&tx, p, &fit.bic, rows.len(), fit.k)?;
    let members: Vec<(i64, usize)> = rows
        .iter()
        .map(|r| r.id)
        .zip(fit.labels.iter().copied())
        .collect();
    let lineage = lineage::link_pinned(&previous, &members, fit.k, &pins);
    let (group_family, events) = store_lineage(&tx, run_id, &lineage)?;
    store_memberships(&tx, run_id, &rows, &fit, &group_family, &pins)?;
    model.component_family = fit.groups.iter().map(|&g| group_family[g]).collect();
    // Quieter triggers: placed where the model is confident, else `quiet`.
    let quiet = with_data(
        target_triggers_in(&tx, f64::NEG_INFINITY, p.min_snr, false)?,
        src,
        &mut without_data,
    );
    let (qfps, n_quiet_computed) = ensure_features(&tx, &quiet, src, need_maps)?;
    let placed = store_placements(&tx, run_id, &model, &quiet, &qfps, "cluster", &pins)?;
    tx.execute(
        "UPDATE cluster_runs SET model_json = ?2 WHERE id = ?1",
        params![run_id, serde_json::to_string(&model)?],
    )?;
    let families = list_families(&tx)?;
    tx.commit()?;
    Ok(ClusterReport {
        run_id,
        n_clustered: rows.len(),
        n_quiet_placed: placed.n_assigned,
        n_quiet: placed.n_quiet,
        n_features_computed: n_computed + n_quiet_computed,
        bic: fit.bic,
        starts: model.starts,
        events,
        families,
        without_data,
    })
}

/// A fitted mixture applied to the fit data, components grouped into families.
struct Fit {
    /// `(k, BIC)` for every number of components tried.
    bic: Vec<(usize, f64)>,
    /// Group (family index of this run) of every mixture component.
    groups: Vec<usize>,
    /// Number of groups.
    k: usize,
    /// Membership probabilities per row and group (`n × k`).
    resp: Vec<f64>,
    /// Log-likelihood of every row under the mixture.
    loglik: Vec<f64>,
    /// Most probable group of every row.
    labels: Vec<usize>,
}

/// Fit the model on the fingerprints and group its components.
fn fit_and_group(fps: &Fingerprints, p: &ClusterParams) -> Result<(FamilyModel, Fit)> {
    let (model, bic) = fit_model(fps, p)?;
    let x = model.vectors(fps);
    let (cresp, loglik) = model.gmm.predict_proba(x.view());
    let groups = component_groups(&cresp, model.gmm.k(), p.merge_overlap);
    let (resp, k) = group_resp(&cresp, model.gmm.k(), &groups);
    let labels: Vec<usize> = resp.chunks(k).map(argmax).collect();
    let fit = Fit {
        bic,
        groups,
        k,
        resp,
        loglik,
        labels,
    };
    Ok((model, fit))
}

/// Trigger id → family id of every member of an active family.
fn active_memberships(tx: &Transaction) -> Result<HashMap<i64, i64>> {
    let mut st = tx.prepare(
        "SELECT m.trigger_id, m.family_id FROM family_members m JOIN families f ON f.id = m.family_id \
         WHERE f.status = ?1",
    )?;
    let mut old = HashMap::new();
    for r in st.query_map([FamilyStatus::Active], |r| {
        Ok((r.get::<_, i64>(0)?, r.get::<_, i64>(1)?))
    })? {
        let (t, f) = r?;
        old.insert(t, f);
    }
    Ok(old)
}

/// Trigger id → family id of every trigger a scientist pinned (by a merge,
/// split or move) to a family that is still active.
fn active_pins(tx: &Connection) -> Result<HashMap<i64, i64>> {
    let mut st = tx.prepare(
        "SELECT p.trigger_id, p.family_id FROM family_pins p JOIN families f ON f.id = p.family_id \
         WHERE f.status = ?1",
    )?;
    let v = st
        .query_map([FamilyStatus::Active], |r| Ok((r.get(0)?, r.get(1)?)))?
        .collect::<rusqlite::Result<_>>()?;
    Ok(v)
}

/// Record the run (families reference it); the model is stored at the end.
fn insert_run(
    tx: &Transaction,
    p: &ClusterParams,
    bic: &[(usize, f64)],
    n_clustered: usize,
    n_families: usize,
) -> Result<i64> {
    tx.execute(
        "INSERT INTO cluster_runs (created_utc, params_json, tool_version, feature_version, \
         n_clustered, n_families, bic_json, model_json) VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, '{}')",
        params![
            now_utc(),
            serde_json::to_string(p)?,
            env!("CARGO_PKG_VERSION"),
            FEATURE_VERSION,
            n_clustered as i64,
            n_families as i64,
            serde_json::to_string(bic)?
        ],
    )?;
    Ok(tx.last_insert_rowid())
}

/// Create the run's new families (in group order), apply merges and
/// retirements, retire active families left without members, mark the
/// run's families active and record the events. Returns the family id of
/// every group and the events.
fn store_lineage(
    tx: &Transaction,
    run_id: i64,
    lineage: &Lineage,
) -> Result<(Vec<i64>, Vec<FamilyEvent>)> {
    let mut new_ids = Vec::with_capacity(lineage.n_new);
    for _ in 0..lineage.n_new {
        tx.execute(
            "INSERT INTO families (status, created_run, last_run) VALUES (?1, ?2, ?2)",
            params![FamilyStatus::Active, run_id],
        )?;
        new_ids.push(tx.last_insert_rowid());
    }
    let (group_family, events) = lineage.resolve(&new_ids);
    for e in &events {
        match e.kind {
            EventKind::Merge => {
                tx.execute(
                    "UPDATE families SET status = ?4, merged_into = ?2, component = NULL, \
                     last_run = ?3 WHERE id = ?1",
                    params![e.family_id, e.other_family_id, run_id, FamilyStatus::Merged],
                )?;
            }
            EventKind::Retired => {
                tx.execute(
                    "UPDATE families SET status = ?3, component = NULL, last_run = ?2 WHERE id = ?1",
                    params![e.family_id, run_id, FamilyStatus::Retired],
                )?;
            }
            EventKind::Kept | EventKind::New | EventKind::Split => {}
        }
    }
    // Families kept by their pinned members alone: active, no component.
    for f in &lineage.pinned_only {
        tx.execute(
            "UPDATE families SET status = ?3, component = NULL, last_run = ?2 WHERE id = ?1",
            params![f, run_id, FamilyStatus::Active],
        )?;
    }
    let mut alive = group_family.clone();
    alive.extend(&lineage.pinned_only);
    // Active families that had no members in this run (all members gone).
    tx.execute(
        "UPDATE families SET status = ?3, component = NULL WHERE status = ?4 AND last_run < ?1 \
         AND id NOT IN (SELECT value FROM json_each(?2))",
        params![
            run_id,
            serde_json::to_string(&alive)?,
            FamilyStatus::Retired,
            FamilyStatus::Active
        ],
    )?;
    for (c, f) in group_family.iter().enumerate() {
        tx.execute(
            "UPDATE families SET status = ?4, component = ?2, last_run = ?3 WHERE id = ?1",
            params![f, c as i64, run_id, FamilyStatus::Active],
        )?;
    }
    for e in &events {
        tx.execute(
            "INSERT INTO family_events (run_id, kind, family_id, other_family_id, n_shared) \
             VALUES (?1, ?2, ?3, ?4, ?5)",
            params![
                run_id,
                e.kind,
                e.family_id,
                e.other_family_id,
                e.n_shared as i64
            ],
        )?;
    }
    Ok((group_family, events))
}

/// Replace all memberships by this run's: each trigger in its most probable
/// group's family, with that probability and its log-likelihood; a pinned
/// trigger in the family a scientist put it in, with probability 1.
fn store_memberships(
    tx: &Transaction,
    run_id: i64,
    rows: &[Row],
    fit: &Fit,
    group_family: &[i64],
    pins: &HashMap<i64, i64>,
) -> Result<()> {
    tx.execute("DELETE FROM family_members", [])?;
    let mut st = tx.prepare(
        "INSERT INTO family_members (trigger_id, family_id, probability, novel, run_id, source, loglik) \
         VALUES (?1, ?2, ?3, 0, ?4, 'cluster', ?5)",
    )?;
    for (i, r) in rows.iter().enumerate() {
        let c = fit.labels[i];
        let (fam, prob) = match pins.get(&r.id) {
            Some(&f) => (f, 1.0),
            None => (group_family[c], fit.resp[i * fit.k + c]),
        };
        st.execute(params![r.id, fam, prob, run_id, fit.loglik[i]])?;
    }
    Ok(())
}

/// The model of the latest clustering run, if any.
pub fn latest_model(conn: &Connection) -> Result<Option<(i64, FamilyModel)>> {
    let got: Option<(i64, String)> = conn
        .query_row(
            "SELECT id, model_json FROM cluster_runs ORDER BY id DESC LIMIT 1",
            [],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .optional()?;
    match got {
        None => Ok(None),
        Some((id, js)) => {
            let m: FamilyModel = serde_json::from_str(&js).with_context(|| {
                format!("catalogue cluster_runs id {id}: model_json unreadable")
            })?;
            Ok(Some((id, m)))
        }
    }
}

/// Membership probability a trigger below the clustering SNR needs to be
/// placed in a family (else it is unclassified as `quiet`). Common practice
/// for a mixture's hard assignment with a reject option (Chow 1970, IEEE
/// Trans. Inf. Theory 16, 41: reject when the largest posterior is below a
/// threshold); 0.9 chosen here, not tuned.
pub const QUIET_MIN_PROBABILITY: f64 = 0.9;

/// Place `rows` (fingerprints `fps`) with `model` and store their
/// memberships (`source` is `cluster` or `assign`): a trigger with SNR ≥
/// the model's `min_snr` goes to its most probable family unless its
/// log-likelihood is below the novelty threshold (then `novel`); a quieter
/// one goes to its most probable family only with probability ≥
/// [`QUIET_MIN_PROBABILITY`] and a log-likelihood above the threshold,
/// else it is unclassified as `quiet`. A pinned trigger goes to the family a
/// scientist put it in (probability 1).
fn store_placements(
    tx: &Transaction,
    run_id: i64,
    model: &FamilyModel,
    rows: &[Row],
    fps: &Fingerprints,
    source: &str,
    pins: &HashMap<i64, i64>,
) -> Result<AssignReport> {
    let mut rep = AssignReport {
        n_assigned: 0,
        n_novel: 0,
        n_quiet: 0,
        n_class_labelled: 0,
        n_class_unclassified: 0,
        without_data: Vec::new(),
    };
    if rows.is_empty() {
        return Ok(rep);
    }
    let x = model.vectors(fps);
    let (cresp, ll) = model.gmm.predict_proba(x.view());
    // Family index of every component (components of one family summed).
    let mut fams: Vec<i64> = model.component_family.clone();
    fams.sort_unstable();
    fams.dedup();
    let groups: Vec<usize> = model
        .component_family
        .iter()
        .map(|f| fams.binary_search(f).expect("present"))
        .collect();
    let (resp, k) = group_resp(&cresp, model.gmm.k(), &groups);
    let mut st = tx.prepare(
        "INSERT INTO family_members (trigger_id, family_id, probability, novel, run_id, source, loglik, reason) \
         VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8)",
    )?;
    for (i, r) in rows.iter().enumerate() {
        let c = argmax(&resp[i * k..(i + 1) * k]);
        let mut prob = resp[i * k + c];
        let far = ll[i] < model.novelty_loglik;
        let mut reason = if r.trig.snr >= model.params.min_snr {
            far.then_some("novel")
        } else {
            (far || prob < QUIET_MIN_PROBABILITY).then_some("quiet")
        };
        let mut fam = reason.is_none().then(|| fams[c]);
        if let Some(&f) = pins.get(&r.id) {
            (fam, prob, reason) = (Some(f), 1.0, None);
        }
        st.execute(params![
            r.id,
            fam,
            prob,
            (reason == Some("novel")) as i64,
            run_id,
            source,
            ll[i],
            reason
        ])?;
        match reason {
            None => rep.n_assigned += 1,
            Some("novel") => rep.n_novel += 1,
            Some(_) => rep.n_quiet += 1,
        }
    }
    Ok(rep)
}

/// Place every target trigger that has no membership yet with the latest
/// model, without refitting (see `store_placements`: a family, `novel` or
/// `quiet`), and classify them by label with the latest classifier, if any
/// ([`super::classifier_db::classify_triggers`]). One transaction.
pub fn assign_new(conn: &mut Connection, src: &dyn EnergyMapSource) -> Result<AssignReport> {
    let tx = conn.transaction_with_behavior(rusqlite::TransactionBehavior::Immediate)?;
    let Some((run_id, model)) = latest_model(&tx)? else {
        return Err(crate::Error::not_found(
            "family model",
            "latest",
            "no families yet: cluster the catalogue before assigning new triggers",
        )
        .into());
    };
    let mut without_data = Vec::new();
    let rows = with_data(
        target_triggers(&tx, f64::NEG_INFINITY, true)?,
        src,
        &mut without_data,
    );
    let need_maps = !model.map_pca.components.is_empty();
    let (fps, _) = ensure_features(&tx, &rows, src, need_maps)?;
    let pins = active_pins(&tx)?;
    let mut rep = store_placements(&tx, run_id, &model, &rows, &fps, "assign", &pins)?;
    let ids: Vec<i64> = rows.iter().map(|r| r.id).collect();
    (rep.n_class_labelled, rep.n_class_unclassified) =
        super::classifier_db::classify_triggers(&tx, &ids)?;
    rep.without_data = without_data;
    tx.commit()?;
    Ok(rep)
}

/// Set a family's human label (and note, if given), recording the change
/// with `author` and the time in `label_history`. One transaction.
///
/// # Errors
/// Unknown family id, or an empty name.
pub fn label(
    conn: &mut Connection,
    family: i64,
    name: &str,
    note: Option<&str>,
    author: &str,
) -> Result<()> {
    let name = name.trim();
    if name.is_empty() {
        return Err(crate::Error::invalid("name", "must not be empty").into());
    }
    let tx = conn.transaction()?;
    let cur: Option<(Option<String>, Option<String>)> = tx
        .query_row(
            "SELECT label, note FROM families WHERE id = ?1",
            [family],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .optional()?;
    let Some((old_label, old_note)) = cur else {
        return Err(crate::Error::not_found(
            "family",
            family,
            format!("no family with id {family}"),
        )
        .into());
    };
    let new_note = note.map(str::to_owned).or(old_note.clone());
    tx.execute(
        "UPDATE families SET label = ?2, note = ?3 WHERE id = ?1",
        params![family, name, new_note],
    )?;
    tx.execute(
        "INSERT INTO label_history (family_id, changed_utc, author, old_label, new_label, old_note, new_note) \
         VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7)",
        params![family, now_utc(), author, old_label, name, old_note, new_note],
    )?;
    tx.commit()?;
    Ok(())
}

/// Label history of a family, oldest first.
pub fn label_history(conn: &Connection, family: i64) -> Result<Vec<LabelChange>> {
    let mut st = conn.prepare(
        "SELECT changed_utc, author, old_label, new_label, old_note, new_note FROM label_history \
         WHERE family_id = ?1 ORDER BY id",
    )?;
    let v = st
        .query_map([family], |r| {
            Ok(LabelChange {
                changed_utc: r.get(0)?,
                author: r.get(1)?,
                old_label: r.get(2)?,
                new_label: r.get(3)?,
                old_note: r.get(4)?,
                new_note: r.get(5)?,
            })
        })?
        .collect::<rusqlite::Result<_>>()?;
    Ok(v)
}

/// Identity events of every run, oldest first: (run id, event).
pub fn family_events(conn: &Connection) -> Result<Vec<(i64, FamilyEvent)>> {
    let mut st = conn.prepare(
        "SELECT run_id, kind, family_id, other_family_id, n_shared FROM family_events ORDER BY id",
    )?;
    let v = st
        .query_map([], |r| {
            Ok((
                r.get(0)?,
                FamilyEvent {
                    kind: r.get(1)?,
                    family_id: r.get(2)?,
                    other_family_id: r.get(3)?,
                    n_shared: r.get::<_, i64>(4)? as usize,
                },
            ))
        })?
        .collect::<rusqlite::Result<_>>()?;
    Ok(v)
}

/// Active families with members, by id, then (if any) the candidate group
/// of novel triggers (`id` 0, `novel` true).
pub fn list_families(conn: &Connection) -> Result<Vec<FamilySummary>> {
    struct Acc {
        snr: Vec<f64>,
        fpk: Vec<f64>,
        dur: Vec<f64>,
        t: Vec<i64>,
        prob: Vec<f64>,
        ex: Vec<(f64, f64, i64)>,
    }
    let mut acc: BTreeMap<i64, Acc> = BTreeMap::new();
    let mut st = conn.prepare(
        "SELECT COALESCE(m.family_id, 0), m.novel, m.probability, t.id, t.snr, t.f_peak_hz, t.t_start_ns, t.t_end_ns, t.t_peak_ns \
         FROM family_members m JOIN triggers t ON t.id = m.trigger_id \
         LEFT JOIN families f ON f.id = m.family_id \
         WHERE (m.novel = 1 AND m.family_id IS NULL) OR f.status = ?1",
    )?;
    let mut rows = st.query([FamilyStatus::Active])?;
    while let Some(r) = rows.next()? {
        let fam: i64 = r.get(0)?;
        let prob: Option<f64> = r.get(2)?;
        let a = acc.entry(fam).or_insert_with(|| Acc {
            snr: vec![],
            fpk: vec![],
            dur: vec![],
            t: vec![],
            prob: vec![],
            ex: vec![],
        });
        let snr: f64 = r.get(4)?;
        a.snr.push(snr);
        a.fpk.push(r.get(5)?);
        let (s, e): (i64, i64) = (r.get(6)?, r.get(7)?);
        a.dur.push((e - s) as f64 * 1e-9);
        a.t.push(r.get(8)?);
        a.prob.push(prob.unwrap_or(f64::NAN));
        a.ex.push((prob.unwrap_or(0.0), snr, r.get(3)?));
    }
    let mut meta = conn.prepare("SELECT label, note FROM families WHERE id = ?1")?;
    let mut out = Vec::new();
    for (id, mut a) in acc {
        let (label, note) = if id == 0 {
            (None, None)
        } else {
            meta.query_row([id], |r| Ok((r.get(0)?, r.get(1)?)))?
        };
        let min = |v: &[f64]| v.iter().cloned().fold(f64::INFINITY, f64::min);
        let max = |v: &[f64]| v.iter().cloned().fold(f64::NEG_INFINITY, f64::max);
        a.ex.sort_by(|x, y| {
            y.0.total_cmp(&x.0)
                .then(y.1.total_cmp(&x.1))
                .then(x.2.cmp(&y.2))
        });
        out.push(FamilySummary {
            id,
            label,
            note,
            count: a.snr.len(),
            median_snr: median(&mut a.snr),
            f_peak_min_hz: min(&a.fpk),
            f_peak_max_hz: max(&a.fpk),
            duration_min_s: min(&a.dur),
            duration_max_s: max(&a.dur),
            first_gps: from_ns(*a.t.iter().min().expect("non-empty")),
            last_gps: from_ns(*a.t.iter().max().expect("non-empty")),
            cohesion: if id == 0 {
                f64::NAN
            } else {
                a.prob.iter().sum::<f64>() / a.prob.len() as f64
            },
            example_trigger_ids: a.ex.iter().take(5).map(|x| x.2).collect(),
            novel: id == 0,
        });
    }
    // Families first by id; the novel candidate group last.
    out.sort_by_key(|f| if f.novel { i64::MAX } else { f.id });
    Ok(out)
}

/// Trigger ids of a family's members, most probable first (for thumbnails).
pub fn family_member_ids(conn: &Connection, family: i64, limit: usize) -> Result<Vec<i64>> {
    let mut st = conn.prepare(
        "SELECT m.trigger_id FROM family_members m JOIN triggers t ON t.id = m.trigger_id \
         WHERE m.family_id = ?1 ORDER BY m.probability DESC, t.snr DESC, t.id LIMIT ?2",
    )?;
    let v = st
        .query_map(params![family, limit as i64], |r| r.get(0))?
        .collect::<rusqlite::Result<_>>()?;
    Ok(v)
}

/// The trigger with `id` and its channel name, if any.
pub(crate) fn trigger_row(conn: &Connection, trigger_id: i64) -> Result<Option<Row>> {
    let mut st = conn.prepare(
        "SELECT t.id, c.name, t.t_peak_ns, t.t_start_ns, t.t_end_ns, t.f_peak_hz, t.f_low_hz, \
         t.f_high_hz, t.snr, t.q, t.energy, COALESCE(t.snr_eq, t.snr) FROM triggers t JOIN channels c ON c.id = t.channel_id \
         WHERE t.id = ?1",
    )?;
    st.query_row([trigger_id], Row::from_sql)
        .optional()
        .map_err(Into::into)
}
