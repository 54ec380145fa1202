//! The SQLite catalogue: schema migrations, connection set-up and the
//! row ↔ record mapping of the core tables.
//!
//! Times are stored as integer GPS nanoseconds ([`to_ns`], [`from_ns`]).
//! Every command that writes does so in one transaction.

use anyhow::{bail, Context, Result};
use rusqlite::Connection;
use std::path::Path;

/// Numbered migrations, applied in order; the schema version is
/// `PRAGMA user_version` = number of migrations applied. Never edit a
/// migration that has shipped: add a new one.
// At integration: 0001_init, 0002_families, 0003_coupling, 0004_merges.
pub const MIGRATIONS: &[(&str, &str)] = &[
    ("0001_init", include_str!("../../migrations/0001_init.sql")),
    (
        "0004_merges",
        include_str!("../../migrations/0004_merges.sql"),
    ),
];

/// Schema version this build writes.
pub fn schema_version() -> i64 {
    MIGRATIONS.len() as i64
}

/// GPS seconds → integer nanoseconds (rounded).
pub fn to_ns(t_gps: f64) -> i64 {
    (t_gps * 1e9).round() as i64
}

/// Integer nanoseconds → GPS seconds.
pub fn from_ns(ns: i64) -> f64 {
    // Split to keep full precision for large GPS times.
    (ns / 1_000_000_000) as f64 + (ns % 1_000_000_000) as f64 * 1e-9
}

/// Open (creating if needed) the catalogue at `path`, set per-connection
/// pragmas (WAL, busy timeout, foreign keys) and apply pending migrations in
/// one transaction.
///
/// # Errors
/// A catalogue written by a newer glitchbook (higher `user_version`) is
/// refused and left untouched; so is a file that is not SQLite.
pub fn open(path: &Path) -> Result<Connection> {
    let mut conn =
        Connection::open(path).with_context(|| format!("opening catalogue {}", path.display()))?;
    conn.busy_timeout(std::time::Duration::from_secs(60))?;
    let version: i64 = conn
        .query_row("PRAGMA user_version", [], |r| r.get(0))
        .with_context(|| {
            format!(
                "{}: not a glitchbook catalogue (SQLite could not read it)",
                path.display()
            )
        })?;
    if version > schema_version() {
        bail!(
            "{}: catalogue schema version {version} is newer than this glitchbook supports ({}); \
             use a newer glitchbook (the file was not modified)",
            path.display(),
            schema_version()
        );
    }
    conn.pragma_update(None, "journal_mode", "WAL")?;
    conn.pragma_update(None, "foreign_keys", "ON")?;
    conn.pragma_update(None, "synchronous", "NORMAL")?;
    migrate(&mut conn).with_context(|| format!("upgrading catalogue {}", path.display()))?;
    Ok(conn)
}

/// Apply every pending migration and the version bump in one immediate
/// transaction (so two processes cannot both migrate).
fn migrate(conn: &mut Connection) -> Result<()> {
    let tx = conn.transaction_with_behavior(rusqlite::TransactionBehavior::Immediate)?;
    let version: i64 = tx.query_row("PRAGMA user_version", [], |r| r.get(0))?;
    for (i, (name, sql)) in MIGRATIONS.iter().enumerate().skip(version.max(0) as usize) {
        tx.execute_batch(sql)
            .with_context(|| format!("migration {name}"))?;
        tx.pragma_update(None, "user_version", (i + 1) as i64)?;
    }
    tx.commit()?;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn migrations_apply_and_reopen() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("c.db");
        drop(open(&p).unwrap());
        let conn = open(&p).unwrap();
        let v: i64 = conn
            .query_row("PRAGMA user_version", [], |r| r.get(0))
            .unwrap();
        assert_eq!(v, schema_version());
    }

    #[test]
    fn newer_catalogue_refused() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("c.db");
        Connection::open(&p)
            .unwrap()
            .pragma_update(None, "user_version", 999)
            .unwrap();
        let err = open(&p).unwrap_err().to_string();
        assert!(err.contains("newer"), "{err}");
    }

    #[test]
    fn ns_round_trip() {
        let t = 1_400_000_123.456_789_012;
        assert!((from_ns(to_ns(t)) - t).abs() < 1e-6);
    }
}
