//! Catalogue adapter of the classifier ([`super::classifier`]): reads the
//! labelled families' members and their stored fingerprints, trains and
//! cross-validates, stores the classifier (`classifiers`) and each target
//! trigger's answer (`trigger_classes`). `classify` is
//! [`train_and_classify`] (one transaction); `assign` calls
//! [`classify_triggers`] on the triggers it placed.

use super::classifier::{
    cross_validate, train, Classifier, ClassifierParams, CrossValidation, UNLABELLED,
};
use super::features::{blob_to_f32, FEATURE_VERSION, N_SCALARS};
use super::lineage::FamilyStatus;
use crate::catalogue::now_utc;
use anyhow::{Context, Result};
use rusqlite::{params, Connection, OptionalExtension};
use serde::Serialize;
use std::collections::BTreeSet;

/// Result of [`train_and_classify`].
#[derive(Debug, Clone, Serialize)]
pub struct ClassifyReport {
    /// Catalogue id of the classifier.
    pub classifier_id: i64,
    /// Training rows (members of active families with a current fingerprint).
    pub n_train: usize,
    /// The cross-validation.
    pub cross_validation: CrossValidation,
    /// Target triggers given a label.
    pub n_labelled: usize,
    /// Target triggers left unclassified (`unlabelled`, `uncertain`, `novel`).
    pub n_unclassified: usize,
}

/// One target trigger with a membership row: id, novel flag, scalars.
struct Seen {
    id: i64,
    novel: bool,
    scalars: Vec<f32>,
}

/// Target triggers with a membership row and a current fingerprint (with
/// `ids`, only those), with their active family's label: `Some(label)`,
/// `Some(UNLABELLED)` for an unlabelled family, None outside families.
fn seen_triggers(conn: &Connection, ids: Option<&[i64]>) -> Result<Vec<(Seen, Option<String>)>> {
    let mut st = conn.prepare(
        "SELECT m.trigger_id, m.novel, x.scalars, f.label, f.status FROM family_members m \
         JOIN features x ON x.trigger_id = m.trigger_id AND x.version = ?1 \
         LEFT JOIN families f ON f.id = m.family_id \
         WHERE ?2 IS NULL OR m.trigger_id IN (SELECT value FROM json_each(?2)) \
         ORDER BY m.trigger_id",
    )?;
    let ids_json = ids.map(serde_json::to_string).transpose()?;
    let rows = st.query_map(params![FEATURE_VERSION, ids_json], |r| {
        Ok((
            r.get::<_, i64>(0)?,
            r.get::<_, i64>(1)?,
            r.get::<_, Vec<u8>>(2)?,
            r.get::<_, Option<String>>(3)?,
            r.get::<_, Option<FamilyStatus>>(4)?,
        ))
    })?;
    let mut out = Vec::new();
    for row in rows {
        let (id, novel, blob, label, status) = row?;
        let scalars = blob_to_f32(&blob).with_context(|| format!("features of trigger {id}"))?;
        if scalars.len() != N_SCALARS {
            continue;
        }
        let class = match status {
            Some(FamilyStatus::Active) => Some(label.unwrap_or_else(|| UNLABELLED.to_string())),
            _ => None,
        };
        out.push((
            Seen {
                id,
                novel: novel != 0,
                scalars,
            },
            class,
        ));
    }
    Ok(out)
}

/// Store each trigger's answer under classifier `id`; returns (labelled,
/// unclassified).
fn store_classes(
    conn: &Connection,
    id: i64,
    model: &Classifier,
    seen: &[Seen],
) -> Result<(usize, usize)> {
    let mut st = conn.prepare(
        "INSERT OR REPLACE INTO trigger_classes (trigger_id, classifier_id, label, probability, reason) \
         VALUES (?1, ?2, ?3, ?4, ?5)",
    )?;
    let (mut n_lab, mut n_un) = (0, 0);
    for s in seen {
        let p = model.classify(&s.scalars);
        let (label, reason) = if s.novel {
            (None, Some("novel"))
        } else {
            (p.label.clone(), p.reason)
        };
        st.execute(params![s.id, id, label, p.probability, reason])?;
        if label.is_some() {
            n_lab += 1;
        } else {
            n_un += 1;
        }
    }
    Ok((n_lab, n_un))
}

/// Train a classifier on the members of the active families, labelled by
/// their family's label (members of unlabelled families form the class
/// [`UNLABELLED`]), cross-validate it, store it, and classify every target
/// trigger that has a membership row and a fingerprint. One transaction.
///
/// # Errors
/// Invalid parameters, no labelled family, fewer than 2 classes, SQL errors.
pub fn train_and_classify(conn: &mut Connection, p: &ClassifierParams) -> Result<ClassifyReport> {
    p.check()?;
    let tx = conn.transaction_with_behavior(rusqlite::TransactionBehavior::Immediate)?;
    let rows = seen_triggers(&tx, None)?;
    let names: BTreeSet<&str> = rows
        .iter()
        .filter_map(|r| r.1.as_deref())
        .filter(|l| *l != UNLABELLED)
        .collect();
    if names.is_empty() {
        return Err(crate::Error::not_found(
            "family label",
            "any",
            "no labelled family with members: label families with `label` before `classify`",
        )
        .into());
    }
    let mut labels: Vec<String> = names.iter().map(|s| s.to_string()).collect();
    if rows.iter().any(|r| r.1.as_deref() == Some(UNLABELLED)) {
        labels.push(UNLABELLED.to_string());
    }
    let train_rows: Vec<(&[f32], usize)> = rows
        .iter()
        .filter_map(|(s, c)| {
            let c = c.as_deref()?;
            Some((s.scalars.as_slice(), labels.iter().position(|l| l == c)?))
        })
        .collect();
    let xs: Vec<&[f32]> = train_rows.iter().map(|r| r.0).collect();
    let ys: Vec<usize> = train_rows.iter().map(|r| r.1).collect();
    let cv = cross_validate(&xs, &ys, &labels, p)?;
    let model = train(&xs, &ys, &labels, p)?;
    tx.execute(
        "INSERT INTO classifiers (created_utc, n_train, model_json, cv_json) VALUES (?1, ?2, ?3, ?4)",
        params![
            now_utc(),
            xs.len() as i64,
            serde_json::to_string(&model)?,
            serde_json::to_string(&cv)?
        ],
    )?;
    let id = tx.last_insert_rowid();
    let n_train = xs.len();
    drop(xs);
    drop(train_rows);
    let seen: Vec<Seen> = rows.into_iter().map(|r| r.0).collect();
    let (n_labelled, n_unclassified) = store_classes(&tx, id, &model, &seen)?;
    tx.commit()?;
    Ok(ClassifyReport {
        classifier_id: id,
        n_train,
        cross_validation: cv,
        n_labelled,
        n_unclassified,
    })
}

/// The latest classifier and its cross-validation, if any.
pub fn latest_classifier(conn: &Connection) -> Result<Option<(i64, Classifier, CrossValidation)>> {
    let got: Option<(i64, String, String)> = conn
        .query_row(
            "SELECT id, model_json, cv_json FROM classifiers ORDER BY id DESC LIMIT 1",
            [],
            |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)),
        )
        .optional()?;
    let Some((id, m, cv)) = got else {
        return Ok(None);
    };
    let m: Classifier = serde_json::from_str(&m)
        .with_context(|| format!("catalogue classifiers id {id}: model_json unreadable"))?;
    let cv: CrossValidation = serde_json::from_str(&cv)
        .with_context(|| format!("catalogue classifiers id {id}: cv_json unreadable"))?;
    Ok(Some((id, m, cv)))
}

/// Classify `ids` with the latest classifier (none stored: nothing done).
/// Returns (labelled, unclassified). Runs inside the caller's transaction.
pub fn classify_triggers(conn: &Connection, ids: &[i64]) -> Result<(usize, usize)> {
    let Some((id, model, _)) = latest_classifier(conn)? else {
        return Ok((0, 0));
    };
    let seen: Vec<Seen> = seen_triggers(conn, Some(ids))?
        .into_iter()
        .map(|r| r.0)
        .collect();
    store_classes(conn, id, &model, &seen)
}

/// A trigger's class answer: (label, probability, reason).
pub type ClassAnswer = (Option<String>, f64, Option<String>);

/// The stored class answer of a trigger, if any.
pub fn trigger_class(conn: &Connection, trigger_id: i64) -> Result<Option<ClassAnswer>> {
    conn.query_row(
        "SELECT label, probability, reason FROM trigger_classes WHERE trigger_id = ?1",
        [trigger_id],
        |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)),
    )
    .optional()
    .map_err(Into::into)
}
