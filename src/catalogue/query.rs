//! Reads: channels, triggers, analysed segments.

use super::{from_ns, to_ns};
use crate::segments::{Segment, SegmentList};
use crate::trigger::Trigger;
use anyhow::Result;
use rusqlite::{types::Value, Connection, OptionalExtension, Row};
use serde::Serialize;

/// One row of `channels`, with trigger and scan counts.
#[derive(Debug, Clone, Default, PartialEq, Serialize)]
pub struct ChannelRow {
    /// Channel id.
    pub id: i64,
    /// Channel name (verbatim).
    pub name: String,
    /// `target` or `aux`.
    pub role: String,
    /// Sample rate \[Hz\]; None when known only from imports.
    pub rate_hz: Option<f64>,
    /// Number of scans and imports recorded.
    pub n_scans: i64,
    /// Number of triggers listed: found by its scans and imports, minus
    /// those a later scan superseded.
    pub n_triggers: i64,
    /// Total analysed time (union over the channel's scans) \[s\].
    pub analysed_s: f64,
}

/// One trigger as stored, with its channel name.
#[derive(Debug, Clone, Default, PartialEq, Serialize)]
pub struct TriggerRow {
    /// Trigger id.
    pub id: i64,
    /// Channel name.
    pub channel: String,
    /// Time of the loudest tile \[GPS s\].
    pub t_peak: f64,
    /// Start of the trigger's extent \[GPS s\].
    pub t_start: f64,
    /// End of the trigger's extent \[GPS s\].
    pub t_end: f64,
    /// Peak frequency \[Hz\].
    pub f_peak: f64,
    /// Lower frequency edge \[Hz\].
    pub f_low: f64,
    /// Upper frequency edge \[Hz\].
    pub f_high: f64,
    /// Signal-to-noise ratio.
    pub snr: f64,
    /// Quality factor (None when unknown).
    pub q: Option<f64>,
    /// Normalised energy Z.
    pub energy: f64,
    /// Equivalent SNR of the trigger's clustered tiles (the single-tile
    /// SNR for triggers stored before it was measured).
    pub snr_eq: f64,
}

impl TriggerRow {
    /// The stored trigger as a [`Trigger`] (unknown `q` becomes NaN).
    pub fn to_trigger(&self) -> Trigger {
        Trigger {
            t_peak: self.t_peak,
            t_start: self.t_start,
            t_end: self.t_end,
            f_peak: self.f_peak,
            f_low: self.f_low,
            f_high: self.f_high,
            snr: self.snr,
            q: self.q.unwrap_or(f64::NAN),
            energy: self.energy,
            snr_eq: self.snr_eq,
        }
    }

    /// Row mapping for `SELECT t.id, c.name, t.t_peak_ns, t.t_start_ns,
    /// t.t_end_ns, t.f_peak_hz, t.f_low_hz, t.f_high_hz, t.snr, t.q, t.energy,
    /// COALESCE(t.snr_eq, t.snr)`.
    pub(crate) fn from_row(r: &Row) -> rusqlite::Result<TriggerRow> {
        Ok(TriggerRow {
            id: r.get(0)?,
            channel: r.get(1)?,
            t_peak: from_ns(r.get(2)?),
            t_start: from_ns(r.get(3)?),
            t_end: from_ns(r.get(4)?),
            f_peak: r.get(5)?,
            f_low: r.get(6)?,
            f_high: r.get(7)?,
            snr: r.get(8)?,
            q: r.get(9)?,
            energy: r.get(10)?,
            snr_eq: r.get(11)?,
        })
    }
}

/// Filters of a trigger query; all optional.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct TriggerQuery {
    /// Only this channel.
    pub channel: Option<String>,
    /// Only triggers with `snr >= min_snr`.
    pub min_snr: Option<f64>,
    /// Only `t_peak >= since` \[GPS s\].
    pub since: Option<f64>,
    /// Only `t_peak < until` \[GPS s\].
    pub until: Option<f64>,
    /// At most this many rows (earliest first).
    pub limit: Option<usize>,
    /// Only members of this family (0 = the triggers marked novel).
    pub family: Option<i64>,
}

impl TriggerQuery {
    /// Check the filters (no I/O).
    ///
    /// # Errors
    /// [`crate::Error::InvalidParameter`] naming the field: a bound that is
    /// not a finite number, or `since ≥ until`.
    pub fn check(&self) -> crate::Result<()> {
        use crate::Error;
        for (field, v) in [
            ("since", self.since),
            ("until", self.until),
            ("min_snr", self.min_snr),
        ] {
            if let Some(x) = v.filter(|x| !x.is_finite()) {
                return Err(Error::invalid(
                    field,
                    format!("must be a finite number, got {x}"),
                ));
            }
        }
        for (field, v) in [("since", self.since), ("until", self.until)] {
            if let Some(x) = v {
                crate::catalogue::check_gps(field, x)?;
            }
        }
        if let (Some(a), Some(b)) = (self.since, self.until) {
            if a >= b {
                return Err(Error::invalid(
                    "since",
                    format!("({a}) must be before {{until}} ({b})"),
                ));
            }
        }
        Ok(())
    }
}

/// The SQL and bound values of a trigger query (public to the crate so a
/// test can check its plan).
pub(crate) fn trigger_sql(conn: &Connection, q: &TriggerQuery) -> Result<(String, Vec<Value>)> {
    let mut sql = String::from(
        "SELECT t.id, c.name, t.t_peak_ns, t.t_start_ns, t.t_end_ns, t.f_peak_hz, t.f_low_hz, \
         t.f_high_hz, t.snr, t.q, t.energy, COALESCE(t.snr_eq, t.snr) FROM triggers t \
         JOIN channels c ON c.id = t.channel_id \
         WHERE 1",
    );
    let mut vals: Vec<Value> = Vec::new();
    if let Some(name) = &q.channel {
        let Some(ch) = channel_by_name(conn, name)? else {
            return Err(crate::Error::not_found(
                "channel",
                name,
                format!("no channel named {name:?} in the catalogue"),
            )
            .into());
        };
        vals.push(Value::Integer(ch.id));
        sql.push_str(&format!(" AND t.channel_id = ?{}", vals.len()));
    }
    if let Some(t) = q.since {
        vals.push(Value::Integer(to_ns(t)?));
        sql.push_str(&format!(" AND t.t_peak_ns >= ?{}", vals.len()));
    }
    if let Some(t) = q.until {
        vals.push(Value::Integer(to_ns(t)?));
        sql.push_str(&format!(" AND t.t_peak_ns < ?{}", vals.len()));
    }
    if let Some(s) = q.min_snr {
        vals.push(Value::Real(s));
        sql.push_str(&format!(" AND t.snr >= ?{}", vals.len()));
    }
    if let Some(f) = q.family {
        if f == 0 {
            sql.push_str(" AND t.id IN (SELECT trigger_id FROM family_members WHERE novel = 1)");
        } else {
            let known: bool = conn.query_row(
                "SELECT EXISTS (SELECT 1 FROM families WHERE id = ?1)",
                [f],
                |r| r.get(0),
            )?;
            if !known {
                return Err(crate::Error::not_found(
                    "family",
                    f,
                    format!("no family {f} in the catalogue"),
                )
                .into());
            }
            vals.push(Value::Integer(f));
            sql.push_str(&format!(
                " AND t.id IN (SELECT trigger_id FROM family_members WHERE family_id = ?{})",
                vals.len()
            ));
        }
    }
    sql.push_str(" ORDER BY t.t_peak_ns, t.id");
    if let Some(n) = q.limit {
        vals.push(Value::Integer(n.min(i64::MAX as usize) as i64));
        sql.push_str(&format!(" LIMIT ?{}", vals.len()));
    }
    Ok((sql, vals))
}

/// Triggers matching `q`, ordered by peak time.
///
/// # Errors
/// An unknown channel name, or any SQLite error.
pub fn query_triggers(conn: &Connection, q: &TriggerQuery) -> Result<Vec<TriggerRow>> {
    q.check()?;
    let (sql, vals) = trigger_sql(conn, q)?;
    let mut st = conn.prepare_cached(&sql)?;
    let rows = st.query_map(rusqlite::params_from_iter(vals), TriggerRow::from_row)?;
    Ok(rows.collect::<rusqlite::Result<Vec<_>>>()?)
}

/// Row mapping of `channels` (+ counts).
fn channel_from_row(r: &Row) -> rusqlite::Result<ChannelRow> {
    Ok(ChannelRow {
        id: r.get(0)?,
        name: r.get(1)?,
        role: r.get(2)?,
        rate_hz: r.get(3)?,
        n_scans: r.get(4)?,
        n_triggers: r.get(5)?,
        analysed_s: 0.0,
    })
}

const CHANNEL_SQL: &str = "SELECT c.id, c.name, c.role, c.rate_hz, \
     (SELECT COUNT(*) FROM scans s WHERE s.channel_id = c.id), \
     (SELECT COALESCE(SUM(s.n_triggers), 0) FROM scans s WHERE s.channel_id = c.id) \
     - (SELECT COUNT(*) FROM superseded_triggers st JOIN scans s ON s.id = st.scan_id \
        WHERE s.channel_id = c.id) \
     FROM channels c";

/// The channel called `name`, if any.
///
/// # Errors
/// SQLite errors only.
pub fn channel_by_name(conn: &Connection, name: &str) -> Result<Option<ChannelRow>> {
    let row = conn
        .prepare_cached(&format!("{CHANNEL_SQL} WHERE c.name = ?1"))?
        .query_row([name], channel_from_row)
        .optional()?;
    match row {
        Some(mut c) => {
            c.analysed_s = analysed_segments(conn, &c.name)?.total();
            Ok(Some(c))
        }
        None => Ok(None),
    }
}

/// All channels, ordered by name.
///
/// # Errors
/// SQLite errors only.
pub fn channels(conn: &Connection) -> Result<Vec<ChannelRow>> {
    let mut st = conn.prepare_cached(&format!("{CHANNEL_SQL} ORDER BY c.name"))?;
    let mut out = st
        .query_map([], channel_from_row)?
        .collect::<rusqlite::Result<Vec<_>>>()?;
    for c in &mut out {
        c.analysed_s = analysed_segments(conn, &c.name)?.total();
    }
    Ok(out)
}

/// The analysed time of a channel: the union of the analysed segments of
/// all its scans and imports (empty for an unknown channel).
///
/// # Errors
/// SQLite errors only.
pub fn analysed_segments(conn: &Connection, channel: &str) -> Result<SegmentList> {
    let mut st = conn.prepare_cached(
        "SELECT a.start_ns, a.end_ns FROM analysed_segments a \
         JOIN scans s ON s.id = a.scan_id JOIN channels c ON c.id = s.channel_id \
         WHERE c.name = ?1",
    )?;
    let segs = st
        .query_map([channel], |r| {
            Ok(Segment::new(from_ns(r.get(0)?), from_ns(r.get(1)?)))
        })?
        .collect::<rusqlite::Result<Vec<_>>>()?;
    Ok(SegmentList::from_segments(segs))
}

/// The analysed segments of one scan.
///
/// # Errors
/// Database errors.
pub fn scan_segments(conn: &Connection, scan_id: i64) -> Result<SegmentList> {
    let mut st = conn.prepare_cached(
        "SELECT start_ns, end_ns FROM analysed_segments WHERE scan_id = ?1 ORDER BY start_ns",
    )?;
    let segs = st
        .query_map([scan_id], |r| {
            Ok(Segment::new(from_ns(r.get(0)?), from_ns(r.get(1)?)))
        })?
        .collect::<rusqlite::Result<Vec<_>>>()?;
    Ok(SegmentList::from_segments(segs))
}

/// A trigger's place in the families: its family (id, label, membership
/// probability) or why it has none.
#[derive(Debug, Clone, Default, PartialEq, Serialize)]
pub struct TriggerFamily {
    /// Family id (None: in no family).
    pub family_id: Option<i64>,
    /// The family's human label, if any.
    pub family_label: Option<String>,
    /// Membership probability in that family.
    pub family_probability: Option<f64>,
    /// Why the trigger is in no family: `quiet` or `novel` (None for a
    /// member, or for a trigger never clustered).
    pub unclassified: Option<String>,
}

/// The family of each trigger of `ids` that has a `family_members` row.
///
/// # Errors
/// SQLite errors only.
pub fn trigger_families(
    conn: &Connection,
    ids: &[i64],
) -> Result<std::collections::HashMap<i64, TriggerFamily>> {
    let mut st = conn.prepare_cached(
        "SELECT m.family_id, f.label, m.probability, m.novel, m.reason FROM family_members m \
         LEFT JOIN families f ON f.id = m.family_id WHERE m.trigger_id = ?1",
    )?;
    let mut out = std::collections::HashMap::new();
    for &id in ids {
        let got = st
            .query_row([id], |r| {
                let fam: Option<i64> = r.get(0)?;
                let novel: i64 = r.get(3)?;
                let reason: Option<String> = r.get(4)?;
                Ok(TriggerFamily {
                    family_id: fam,
                    family_label: r.get(1)?,
                    family_probability: if fam.is_some() { r.get(2)? } else { None },
                    unclassified: reason.or_else(|| (novel == 1).then(|| "novel".to_string())),
                })
            })
            .optional()?;
        if let Some(f) = got {
            out.insert(id, f);
        }
    }
    Ok(out)
}
