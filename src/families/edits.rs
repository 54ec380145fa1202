//! The scientists' edits of families: merge two, split one, move triggers
//! between them. Catalogue adapter like [`super::db`] (every statement of
//! the edits is here); each command is one transaction that checks every id
//! before it writes, so a bad id leaves the catalogue exactly as it was.
//!
//! Each edit is recorded in `family_edits` (who, when, what, which
//! triggers; read back with [`edit_history`]), and the triggers it places
//! are pinned to their family (`family_pins`): later `cluster` runs keep
//! them there and keep the edited families' ids ([`super::lineage::link_pinned`]).
//! A merge also points the latest model's components of the merged family
//! at the family it joined, so `assign` places new triggers there.

use super::db::latest_model;
use super::lineage::FamilyStatus;
use crate::catalogue::now_utc;
use crate::Error;
use anyhow::Result;
use rusqlite::{params, Connection, OptionalExtension, Transaction};
use serde::Serialize;
use std::collections::BTreeSet;

/// What a scientist did (column `family_edits.kind`).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum EditKind {
    /// `family_id` merged into `other_family_id`.
    Merge,
    /// `other_family_id` made from triggers of `family_id`.
    Split,
    /// Triggers moved into `family_id`.
    Move,
}

impl EditKind {
    /// The stored (and JSON) name.
    pub fn as_str(self) -> &'static str {
        match self {
            EditKind::Merge => "merge",
            EditKind::Split => "split",
            EditKind::Move => "move",
        }
    }

    fn parse(s: &str) -> Option<EditKind> {
        [EditKind::Merge, EditKind::Split, EditKind::Move]
            .into_iter()
            .find(|k| k.as_str() == s)
    }
}

/// One recorded edit.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct FamilyEdit {
    /// Edit id.
    pub id: i64,
    /// When \[UTC, ISO 8601\].
    pub changed_utc: String,
    /// Who.
    pub author: String,
    /// What.
    pub kind: EditKind,
    /// Merge: the family merged away; split: the family split; move: the
    /// destination.
    pub family_id: i64,
    /// Merge: the family it joined; split: the new family; move: none.
    pub other_family_id: Option<i64>,
    /// The triggers concerned (merge: the merged family's members).
    pub trigger_ids: Vec<i64>,
    /// Free-text note.
    pub note: Option<String>,
}

/// The family `id` must exist and be active.
fn check_active(tx: &Transaction, id: i64) -> Result<()> {
    let got: Option<(FamilyStatus, Option<i64>)> = tx
        .query_row(
            "SELECT status, merged_into FROM families WHERE id = ?1",
            [id],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .optional()?;
    match got {
        None => Err(Error::not_found("family", id, format!("no family with id {id}")).into()),
        Some((FamilyStatus::Active, _)) => Ok(()),
        Some((FamilyStatus::Merged, into)) => Err(Error::invalid(
            "family",
            format!(
                "family {id} was merged into family {}; edit that one",
                into.map_or("?".into(), |i| i.to_string())
            ),
        )
        .into()),
        Some((s, _)) => Err(Error::invalid("family", format!("family {id} is {s}")).into()),
    }
}

/// The current family of each trigger (error naming the first trigger that
/// is not a target trigger with a family).
fn current_families(tx: &Transaction, trigger_ids: &[i64]) -> Result<Vec<i64>> {
    let mut st = tx.prepare("SELECT family_id FROM family_members WHERE trigger_id = ?1")?;
    let mut exists = tx.prepare("SELECT 1 FROM triggers WHERE id = ?1")?;
    let mut out = Vec::with_capacity(trigger_ids.len());
    for &t in trigger_ids {
        let f: Option<Option<i64>> = st.query_row([t], |r| r.get(0)).optional()?;
        match f {
            Some(Some(f)) => out.push(f),
            Some(None) | None if exists.exists([t])? => {
                return Err(Error::invalid(
                    "trigger",
                    format!(
                        "trigger {t} is in no family (unclassified or not a clustered target \
                         trigger); move it with `move-triggers` into a family"
                    ),
                )
                .into())
            }
            _ => {
                return Err(
                    Error::not_found("trigger", t, format!("no trigger with id {t}")).into(),
                )
            }
        }
    }
    Ok(out)
}

/// Distinct trigger ids, or an error when the list is empty.
fn distinct(trigger_ids: &[i64]) -> Result<Vec<i64>> {
    let set: BTreeSet<i64> = trigger_ids.iter().copied().collect();
    if set.is_empty() {
        return Err(Error::invalid("trigger_ids", "name at least one trigger").into());
    }
    Ok(set.into_iter().collect())
}

/// The latest clustering run's id (families exist only after one).
fn latest_run(tx: &Transaction) -> Result<i64> {
    tx.query_row("SELECT MAX(id) FROM cluster_runs", [], |r| {
        r.get::<_, Option<i64>>(0)
    })?
    .ok_or_else(|| {
        Error::not_found(
            "family model",
            "latest",
            "no families yet: run `cluster` first",
        )
        .into()
    })
}

/// Record the edit and pin `pinned` (trigger, family) pairs to it.
fn record(
    tx: &Transaction,
    kind: EditKind,
    (family, other): (i64, Option<i64>),
    trigger_ids: &[i64],
    pinned: &[(i64, i64)],
    author: &str,
    note: Option<&str>,
) -> Result<FamilyEdit> {
    let changed_utc = now_utc();
    tx.execute(
        "INSERT INTO family_edits (changed_utc, author, kind, family_id, other_family_id, \
         n_triggers, trigger_ids, note) VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8)",
        params![
            changed_utc,
            author,
            kind.as_str(),
            family,
            other,
            trigger_ids.len() as i64,
            serde_json::to_string(trigger_ids)?,
            note
        ],
    )?;
    let id = tx.last_insert_rowid();
    let mut st = tx.prepare(
        "INSERT OR REPLACE INTO family_pins (trigger_id, family_id, edit_id) VALUES (?1, ?2, ?3)",
    )?;
    for &(t, f) in pinned {
        st.execute(params![t, f, id])?;
    }
    Ok(FamilyEdit {
        id,
        changed_utc,
        author: author.to_string(),
        kind,
        family_id: family,
        other_family_id: other,
        trigger_ids: trigger_ids.to_vec(),
        note: note.map(str::to_owned),
    })
}

/// Members of family `f`, by id.
fn members(tx: &Transaction, f: i64) -> Result<Vec<i64>> {
    let mut st = tx.prepare(
        "SELECT trigger_id FROM family_members WHERE family_id = ?1 ORDER BY trigger_id",
    )?;
    let v = st
        .query_map([f], |r| r.get(0))?
        .collect::<rusqlite::Result<_>>()?;
    Ok(v)
}

/// Retire active families left without members by an edit.
fn retire_empty(tx: &Transaction, fams: &[i64]) -> Result<()> {
    for &f in fams {
        tx.execute(
            "UPDATE families SET status = ?2, component = NULL WHERE id = ?1 AND NOT EXISTS \
             (SELECT 1 FROM family_members m WHERE m.family_id = ?1)",
            params![f, FamilyStatus::Retired],
        )?;
    }
    Ok(())
}

/// Merge family `from` into family `into`: its members join `into` (and are
/// pinned there), `from` becomes `merged` (its label history stays), pins
/// to `from` move to `into`, and the latest model's components of `from`
/// place new triggers in `into`. One transaction.
///
/// # Errors
/// Unknown, inactive or equal families (the catalogue is left unchanged).
pub fn merge_families(
    conn: &mut Connection,
    from: i64,
    into: i64,
    author: &str,
    note: Option<&str>,
) -> Result<FamilyEdit> {
    if from == into {
        return Err(
            Error::invalid("family", format!("cannot merge family {from} into itself")).into(),
        );
    }
    let tx = conn.transaction_with_behavior(rusqlite::TransactionBehavior::Immediate)?;
    check_active(&tx, from)?;
    check_active(&tx, into)?;
    let moved = members(&tx, from)?;
    tx.execute(
        "UPDATE family_members SET family_id = ?2 WHERE family_id = ?1",
        params![from, into],
    )?;
    tx.execute(
        "UPDATE family_pins SET family_id = ?2 WHERE family_id = ?1",
        params![from, into],
    )?;
    tx.execute(
        "UPDATE families SET status = ?3, merged_into = ?2, component = NULL WHERE id = ?1",
        params![from, into, FamilyStatus::Merged],
    )?;
    if let Some((run, mut model)) = latest_model(&tx)? {
        if model.component_family.contains(&from) {
            for f in &mut model.component_family {
                if *f == from {
                    *f = into;
                }
            }
            tx.execute(
                "UPDATE cluster_runs SET model_json = ?2 WHERE id = ?1",
                params![run, serde_json::to_string(&model)?],
            )?;
        }
    }
    let pinned: Vec<(i64, i64)> = moved.iter().map(|&t| (t, into)).collect();
    let e = record(
        &tx,
        EditKind::Merge,
        (from, Some(into)),
        &moved,
        &pinned,
        author,
        note,
    )?;
    tx.commit()?;
    Ok(e)
}

/// Split the members `trigger_ids` of `family` into a new family (labelled
/// `label`, if given, with a label-history entry). Both parts are pinned,
/// so a later fit that joins them again keeps the split. Returns the edit
/// (`other_family_id` is the new family). One transaction.
///
/// # Errors
/// Unknown or inactive family, a trigger that is not its member, an empty
/// list, or a list holding every member (the catalogue is left unchanged).
pub fn split_family(
    conn: &mut Connection,
    family: i64,
    trigger_ids: &[i64],
    label: Option<&str>,
    author: &str,
    note: Option<&str>,
) -> Result<FamilyEdit> {
    let ids = distinct(trigger_ids)?;
    let label = label.map(str::trim).filter(|l| !l.is_empty());
    let tx = conn.transaction_with_behavior(rusqlite::TransactionBehavior::Immediate)?;
    check_active(&tx, family)?;
    for (&t, f) in ids.iter().zip(current_families(&tx, &ids)?) {
        if f != family {
            return Err(Error::invalid(
                "trigger",
                format!("trigger {t} is in family {f}, not in family {family}"),
            )
            .into());
        }
    }
    let all = members(&tx, family)?;
    if all.len() == ids.len() {
        return Err(Error::invalid(
            "trigger_ids",
            format!(
                "these are all {} members of family {family}; a split leaves some behind",
                all.len()
            ),
        )
        .into());
    }
    let run = latest_run(&tx)?;
    tx.execute(
        "INSERT INTO families (label, status, created_run, last_run) VALUES (?1, ?2, ?3, ?3)",
        params![label, FamilyStatus::Active, run],
    )?;
    let new_id = tx.last_insert_rowid();
    if let Some(l) = label {
        tx.execute(
            "INSERT INTO label_history (family_id, changed_utc, author, old_label, new_label) \
             VALUES (?1, ?2, ?3, NULL, ?4)",
            params![new_id, now_utc(), author, l],
        )?;
    }
    let mut st = tx.prepare(
        "UPDATE family_members SET family_id = ?2, probability = 1.0 WHERE trigger_id = ?1",
    )?;
    for &t in &ids {
        st.execute(params![t, new_id])?;
    }
    let moved: BTreeSet<i64> = ids.iter().copied().collect();
    let pinned: Vec<(i64, i64)> = all
        .iter()
        .map(|&t| (t, if moved.contains(&t) { new_id } else { family }))
        .collect();
    let e = record(
        &tx,
        EditKind::Split,
        (family, Some(new_id)),
        &ids,
        &pinned,
        author,
        note,
    )?;
    drop(st);
    tx.commit()?;
    Ok(e)
}

/// Move `trigger_ids` (target triggers with a family, or unclassified ones
/// with a membership row) into family `to`, pinned there with probability
/// 1; families left empty are retired. One transaction.
///
/// # Errors
/// Unknown or inactive family, unknown trigger, a trigger without a
/// membership row (never clustered or assigned), an empty list (the
/// catalogue is left unchanged).
pub fn move_triggers(
    conn: &mut Connection,
    trigger_ids: &[i64],
    to: i64,
    author: &str,
    note: Option<&str>,
) -> Result<FamilyEdit> {
    let ids = distinct(trigger_ids)?;
    let tx = conn.transaction_with_behavior(rusqlite::TransactionBehavior::Immediate)?;
    check_active(&tx, to)?;
    let mut from = Vec::new();
    {
        let mut st = tx.prepare("SELECT family_id FROM family_members WHERE trigger_id = ?1")?;
        for &t in &ids {
            let f: Option<Option<i64>> = st.query_row([t], |r| r.get(0)).optional()?;
            match f {
                Some(f) => from.extend(f),
                None => {
                    let exists: bool = tx
                        .prepare("SELECT 1 FROM triggers WHERE id = ?1")?
                        .exists([t])?;
                    return Err(if exists {
                        Error::invalid(
                            "trigger",
                            format!(
                                "trigger {t} has not been clustered or assigned yet (not a target \
                                 trigger, or run `assign` first)"
                            ),
                        )
                    } else {
                        Error::not_found("trigger", t, format!("no trigger with id {t}"))
                    }
                    .into());
                }
            }
        }
    }
    let mut st = tx.prepare(
        "UPDATE family_members SET family_id = ?2, probability = 1.0, novel = 0, reason = NULL \
         WHERE trigger_id = ?1",
    )?;
    for &t in &ids {
        st.execute(params![t, to])?;
    }
    drop(st);
    from.sort_unstable();
    from.dedup();
    retire_empty(&tx, &from)?;
    let pinned: Vec<(i64, i64)> = ids.iter().map(|&t| (t, to)).collect();
    let e = record(&tx, EditKind::Move, (to, None), &ids, &pinned, author, note)?;
    tx.commit()?;
    Ok(e)
}

/// Edits concerning `family` (as either family), oldest first; all edits
/// when `family` is None.
pub fn edit_history(conn: &Connection, family: Option<i64>) -> Result<Vec<FamilyEdit>> {
    let mut st = conn.prepare(
        "SELECT id, changed_utc, author, kind, family_id, other_family_id, trigger_ids, note \
         FROM family_edits WHERE ?1 IS NULL OR family_id = ?1 OR other_family_id = ?1 ORDER BY id",
    )?;
    let rows = st.query_map([family], |r| {
        Ok((
            r.get::<_, i64>(0)?,
            r.get::<_, String>(1)?,
            r.get::<_, String>(2)?,
            r.get::<_, String>(3)?,
            r.get::<_, i64>(4)?,
            r.get::<_, Option<i64>>(5)?,
            r.get::<_, String>(6)?,
            r.get::<_, Option<String>>(7)?,
        ))
    })?;
    let mut out = Vec::new();
    for row in rows {
        let (id, changed_utc, author, kind, family_id, other_family_id, ids, note) = row?;
        let kind = EditKind::parse(&kind).ok_or_else(|| {
            anyhow::anyhow!("catalogue family_edits id {id}: unknown kind {kind:?}")
        })?;
        let trigger_ids = serde_json::from_str(&ids).map_err(|e| {
            anyhow::anyhow!("catalogue family_edits id {id}: trigger_ids unreadable: {e}")
        })?;
        out.push(FamilyEdit {
            id,
            changed_utc,
            author,
            kind,
            family_id,
            other_family_id,
            trigger_ids,
            note,
        });
    }
    Ok(out)
}
