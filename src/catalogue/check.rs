//! Health checks of a catalogue and a checksum of its logical content.

use super::schema_version;
use anyhow::Result;
use rusqlite::{types::ValueRef, Connection};
use serde::Serialize;
use xxhash_rust::xxh3::Xxh3;

/// One line of a `check` report.
#[derive(Debug, Clone, Default, PartialEq, Serialize)]
pub struct CheckItem {
    /// What was checked (e.g. `integrity_check`, `rows.triggers`).
    pub check: String,
    /// `ok`, `FAILED` or `info`.
    pub status: String,
    /// Details (SQLite's message, a count, a version).
    pub detail: String,
}

/// The result of [`check`].
#[derive(Debug, Clone, Default, PartialEq)]
pub struct CheckReport {
    /// Every item, in order.
    pub items: Vec<CheckItem>,
}

impl CheckReport {
    /// Whether every check passed.
    pub fn ok(&self) -> bool {
        self.items.iter().all(|i| i.status != "FAILED")
    }
}

fn item(check: &str, ok: bool, detail: String) -> CheckItem {
    CheckItem {
        check: check.to_string(),
        status: if ok { "ok" } else { "FAILED" }.to_string(),
        detail,
    }
}

/// User tables (not SQLite's own), sorted by name.
fn user_tables(conn: &Connection) -> Result<Vec<String>> {
    let mut st = conn.prepare(
        "SELECT name FROM sqlite_master WHERE type = 'table' AND name NOT LIKE 'sqlite_%' \
         ORDER BY name",
    )?;
    let names = st
        .query_map([], |r| r.get(0))?
        .collect::<rusqlite::Result<Vec<String>>>()?;
    Ok(names)
}

/// Quote an identifier read from `sqlite_master` for use in SQL text.
fn ident(name: &str) -> String {
    format!("\"{}\"", name.replace('"', "\"\""))
}

/// Row counts of every user table, sorted by table name.
///
/// # Errors
/// SQLite errors only.
pub fn table_counts(conn: &Connection) -> Result<Vec<(String, i64)>> {
    let mut out = Vec::new();
    for t in user_tables(conn)? {
        let n: i64 = conn.query_row(&format!("SELECT COUNT(*) FROM {}", ident(&t)), [], |r| {
            r.get(0)
        })?;
        out.push((t, n));
    }
    Ok(out)
}

/// Run `PRAGMA integrity_check`, `PRAGMA foreign_key_check`, the schema
/// version check and the bookkeeping check (each scan's `n_triggers` equals
/// its stored triggers), then list row counts per table.
///
/// # Errors
/// Only when SQLite cannot run the checks at all; failed checks are items.
pub fn check(conn: &Connection) -> Result<CheckReport> {
    let mut items = Vec::new();
    let integrity: Vec<String> = conn
        .prepare("PRAGMA integrity_check")?
        .query_map([], |r| r.get(0))?
        .collect::<rusqlite::Result<_>>()?;
    let ok = integrity.len() == 1 && integrity[0] == "ok";
    items.push(item("integrity_check", ok, integrity.join("; ")));

    let fk: Vec<String> = conn
        .prepare("PRAGMA foreign_key_check")?
        .query_map([], |r| {
            let table: String = r.get(0)?;
            let rowid: Option<i64> = r.get(1)?;
            let parent: String = r.get(2)?;
            Ok(format!("{table} row {rowid:?} -> {parent}"))
        })?
        .collect::<rusqlite::Result<_>>()?;
    let detail = if fk.is_empty() {
        "no dangling references".to_string()
    } else {
        format!("{} dangling: {}", fk.len(), fk.join("; "))
    };
    items.push(item("foreign_key_check", fk.is_empty(), detail));

    let v: i64 = conn.query_row("PRAGMA user_version", [], |r| r.get(0))?;
    items.push(item(
        "schema_version",
        v == schema_version(),
        format!("{v} (this glitchbook writes {})", schema_version()),
    ));

    let bad: i64 = conn.query_row(
        "SELECT COUNT(*) FROM scans s WHERE s.n_triggers != \
         (SELECT COUNT(*) FROM triggers t WHERE t.scan_id = s.id) \
         + (SELECT COUNT(*) FROM superseded_triggers t WHERE t.scan_id = s.id)",
        [],
        |r| r.get(0),
    )?;
    items.push(item(
        "scan_trigger_counts",
        bad == 0,
        format!("{bad} scans whose trigger count differs from the rows stored"),
    ));

    for (t, n) in table_counts(conn)? {
        items.push(CheckItem {
            check: format!("rows.{t}"),
            status: "info".to_string(),
            detail: n.to_string(),
        });
    }
    Ok(CheckReport { items })
}

/// A checksum (hex xxh3-128) of the catalogue's logical content: the schema
/// version, then every user table by name, its rows in primary-key order
/// (tables without a declared key: ordered by all columns), each value with
/// a type tag. Independent of page layout, WAL state and rowids of keyless
/// tables, so it changes only when a row changes.
///
/// # Errors
/// SQLite errors only.
pub fn logical_checksum(conn: &Connection) -> Result<String> {
    let mut h = Xxh3::new();
    let v: i64 = conn.query_row("PRAGMA user_version", [], |r| r.get(0))?;
    h.update(&v.to_le_bytes());
    for t in user_tables(conn)? {
        h.update(&(t.len() as u64).to_le_bytes());
        h.update(t.as_bytes());
        // Column names and primary-key positions.
        let mut cols: Vec<(String, i64)> = conn
            .prepare(&format!("PRAGMA table_info({})", ident(&t)))?
            .query_map([], |r| Ok((r.get::<_, String>(1)?, r.get::<_, i64>(5)?)))?
            .collect::<rusqlite::Result<_>>()?;
        let mut order: Vec<String> = {
            let mut pk: Vec<&(String, i64)> = cols.iter().filter(|c| c.1 > 0).collect();
            pk.sort_by_key(|c| c.1);
            pk.iter().map(|c| ident(&c.0)).collect()
        };
        if order.is_empty() {
            order = cols.iter().map(|c| ident(&c.0)).collect();
        }
        let names: Vec<String> = cols.drain(..).map(|c| ident(&c.0)).collect();
        let sql = format!(
            "SELECT {} FROM {} ORDER BY {}",
            names.join(", "),
            ident(&t),
            order.join(", ")
        );
        let mut st = conn.prepare(&sql)?;
        let n = names.len();
        let mut rows = st.query([])?;
        while let Some(r) = rows.next()? {
            for i in 0..n {
                match r.get_ref(i)? {
                    ValueRef::Null => h.update(&[0]),
                    ValueRef::Integer(x) => {
                        h.update(&[1]);
                        h.update(&x.to_le_bytes());
                    }
                    ValueRef::Real(x) => {
                        h.update(&[2]);
                        h.update(&x.to_bits().to_le_bytes());
                    }
                    ValueRef::Text(b) => {
                        h.update(&[3]);
                        h.update(&(b.len() as u64).to_le_bytes());
                        h.update(b);
                    }
                    ValueRef::Blob(b) => {
                        h.update(&[4]);
                        h.update(&(b.len() as u64).to_le_bytes());
                        h.update(b);
                    }
                }
            }
        }
    }
    Ok(format!("{:032x}", h.digest128()))
}
