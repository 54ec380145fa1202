//! The SQLite catalogue: schema migrations, connection set-up and the
//! row ↔ record mapping of the core tables.
//!
//! Times are stored as integer GPS nanoseconds ([`to_ns`], [`from_ns`]).
//! Every command that writes does so in one transaction: open with [`open`],
//! start `conn.transaction_with_behavior(Immediate)`, call the writers
//! ([`insert_channel_scan`], [`import_triggers`], [`insert_scan`]) for every
//! result, then commit once ([`record_scans`] does this for scans); dropping the transaction on an error writes
//! nothing. A scan whose [`run_key`] (channel, input checksum, analysed
//! segments, parameters, kind) is already stored is skipped
//! ([`InsertOutcome::Skipped`]).
//!
//! Reads: [`query_triggers`] (channel / min SNR / since / until / limit,
//! served by the `(channel_id, t_peak_ns)` index), [`analysed_segments`]
//! (union over a channel's scans), [`channels`], [`channel_by_name`];
//! health: [`check`], [`table_counts`], [`logical_checksum`].

use anyhow::{Context, Result};
use rusqlite::Connection;
use std::path::Path;

mod check;
mod query;
mod write;

pub use check::{check, logical_checksum, table_counts, CheckItem, CheckReport};
pub use query::{
    analysed_segments, channel_by_name, channels, query_triggers, scan_segments, trigger_families,
    ChannelRow, TriggerFamily, TriggerQuery, TriggerRow,
};
pub use write::{
    import_triggers, insert_channel_scan, insert_scan, record_scan_files, record_scans, run_key,
    supersede_earlier, upsert_channel, ImportRecord, InsertOutcome, ScanKind, ScanRecord,
};

/// Numbered migrations, applied in order; the schema version is
/// `PRAGMA user_version` = number of migrations applied. Never edit a
/// migration that has shipped: add a new one.
pub const MIGRATIONS: &[(&str, &str)] = &[
    ("0001_init", include_str!("../../migrations/0001_init.sql")),
    (
        "0002_families",
        include_str!("../../migrations/0002_families.sql"),
    ),
    (
        "0003_coupling",
        include_str!("../../migrations/0003_coupling.sql"),
    ),
    (
        "0004_merges",
        include_str!("../../migrations/0004_merges.sql"),
    ),
    (
        "0006_coupling_words",
        include_str!("../../migrations/0006_coupling_words.sql"),
    ),
    (
        "0007_family_reason",
        include_str!("../../migrations/0007_family_reason.sql"),
    ),
    (
        "0008_family_edits_classifier",
        include_str!("../../migrations/0008_family_edits_classifier.sql"),
    ),
    (
        "0009_scan_files_supersede",
        include_str!("../../migrations/0009_scan_files_supersede.sql"),
    ),
    (
        "0010_cluster_snr",
        include_str!("../../migrations/0010_cluster_snr.sql"),
    ),
];

/// Schema version this build writes.
pub fn schema_version() -> i64 {
    MIGRATIONS.len() as i64
}

/// Current UTC time as ISO 8601 (`YYYY-MM-DDTHH:MM:SSZ`), for the
/// provenance columns (`created_utc`, `changed_utc`, pages' "generated").
pub fn now_utc() -> String {
    humantime::format_rfc3339_seconds(std::time::SystemTime::now()).to_string()
}

/// The largest |GPS time| glitchbook stores \[s\]. Times are kept as
/// integer nanoseconds in 64 bits (±9.22e9 s); 9e9 s (about the year 2265)
/// leaves room so a time plus a duration cannot wrap either.
pub const GPS_LIMIT_S: f64 = 9.0e9;

/// Whether `t` is a GPS time the catalogue can store: finite and
/// |t| ≤ [`GPS_LIMIT_S`].
pub fn gps_ok(t: f64) -> bool {
    t.is_finite() && t.abs() <= GPS_LIMIT_S
}

/// Why `t` is not a storable GPS time (the end of an error message).
pub fn gps_range_message(t: f64) -> String {
    format!("{t} s is outside the GPS times glitchbook stores (|t| ≤ 9e9 s)")
}

/// [`crate::Error::InvalidParameter`] naming `field` when `t` is not a
/// GPS time the catalogue can store (see [`gps_ok`]).
///
/// # Errors
/// As said.
pub fn check_gps(field: &str, t: f64) -> crate::Result<()> {
    if gps_ok(t) {
        Ok(())
    } else {
        Err(crate::Error::invalid(field, gps_range_message(t)))
    }
}

/// GPS seconds → integer nanoseconds (rounded).
///
/// Whole and fractional seconds are converted separately so no precision is
/// lost to the f64 product `t × 1e9` (its spacing near 1.4e18 is 256 ns):
/// a GPS time exactly representable to the ns, such as 1400000010.25,
/// round-trips exactly.
///
/// # Errors
/// [`crate::Error::InvalidParameter`] (field `gps_time`) for a time outside
/// ±[`GPS_LIMIT_S`] or not finite: the product would wrap. Inputs are
/// checked where they are read (with their file and line); this is the
/// last guard.
pub fn to_ns(t_gps: f64) -> crate::Result<i64> {
    check_gps("gps_time", t_gps)?;
    let whole = t_gps.floor();
    let frac = t_gps - whole; // exact (Sterbenz)
    Ok((whole as i64) * 1_000_000_000 + (frac * 1e9).round() as i64)
}

/// Integer nanoseconds → GPS seconds (the nearest f64, up to one rounding).
pub fn from_ns(ns: i64) -> f64 {
    // Split to keep full precision for large GPS times.
    (ns.div_euclid(1_000_000_000)) as f64 + (ns.rem_euclid(1_000_000_000)) as f64 / 1e9
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
    schema_of(&conn, path)?;
    conn.pragma_update(None, "journal_mode", "WAL")?;
    conn.pragma_update(None, "foreign_keys", "ON")?;
    conn.pragma_update(None, "synchronous", "NORMAL")?;
    // 64 MiB page cache (negative = KiB): large imports keep both trigger
    // indexes in memory instead of spilling pages mid-transaction.
    conn.pragma_update(None, "cache_size", -65536)?;
    migrate(&mut conn).with_context(|| format!("upgrading catalogue {}", path.display()))?;
    Ok(conn)
}

/// The catalogue's schema version (`PRAGMA user_version`), refusing a
/// catalogue written by a newer glitchbook and a file SQLite cannot read.
fn schema_of(conn: &Connection, path: &Path) -> Result<i64> {
    let version: i64 = conn
        .query_row("PRAGMA user_version", [], |r| r.get(0))
        .with_context(|| {
            format!(
                "{}: not a glitchbook catalogue (SQLite could not read it)",
                path.display()
            )
        })?;
    if version > schema_version() {
        return Err(crate::Error::SchemaTooNew {
            path: path.to_path_buf(),
            found: version,
            supported: schema_version(),
        }
        .into());
    }
    Ok(version)
}

/// Open an existing catalogue (as [`open`]), refusing to create a new one.
///
/// # Errors
/// No file at `path`, or any error of [`open`].
pub fn open_existing(path: &Path) -> Result<Connection> {
    if !path.exists() {
        return Err(crate::Error::not_found(
            "catalogue",
            path.display(),
            format!(
                "{}: no catalogue here (scan or import triggers into it first)",
                path.display()
            ),
        )
        .into());
    }
    open(path)
}

/// Open an existing catalogue for reading only, as every listing command
/// does (`triggers`, `channels`, `families`, `rates`, `check`, `report`,
/// `thumbnail`): nothing is written, so a catalogue shared read-only on a
/// cluster (file and directory without write permission) can be read.
///
/// The connection is opened read-only and `query_only`. If SQLite cannot
/// set up its shared-memory index (a WAL catalogue whose `-shm`/`-wal`
/// files are absent and cannot be created in a read-only directory), it
/// is reopened as immutable: no writer can hold a WAL catalogue without
/// those files, so there is nothing to miss. An older catalogue is
/// upgraded first when the file can be written (as [`open`]); a read-only
/// one of an older schema is refused, naming what to do.
///
/// # Errors
/// No file at `path`, not a glitchbook catalogue, a newer schema, or an
/// older schema that cannot be upgraded here.
pub fn open_read_only(path: &Path) -> Result<Connection> {
    use rusqlite::OpenFlags;
    if !path.exists() {
        return open_existing(path);
    }
    let flags = OpenFlags::SQLITE_OPEN_READ_ONLY
        | OpenFlags::SQLITE_OPEN_URI
        | OpenFlags::SQLITE_OPEN_NO_MUTEX;
    let version_of = |conn: &Connection| schema_of(conn, path);
    let plain = Connection::open_with_flags(path, flags)
        .with_context(|| format!("opening catalogue {} read-only", path.display()));
    let (conn, version) = match plain.and_then(|c| {
        c.busy_timeout(std::time::Duration::from_secs(60))?;
        let v = version_of(&c)?;
        Ok((c, v))
    }) {
        Ok(cv) => cv,
        Err(first) => {
            // immutable=1: read the file as it is, without the WAL index.
            let uri = format!("file:{}?immutable=1", uri_path(path));
            match Connection::open_with_flags(&uri, flags) {
                Ok(c) => match version_of(&c) {
                    Ok(v) => (c, v),
                    Err(_) => return Err(first),
                },
                Err(_) => return Err(first),
            }
        }
    };
    if version < schema_version() {
        drop(conn);
        // Upgrading writes: only when the file can be written.
        return match open(path) {
            Ok(c) => {
                c.pragma_update(None, "query_only", "ON")?;
                Ok(c)
            }
            Err(e) => Err(e.context(format!(
                "{}: catalogue schema version {version} is older than this glitchbook's \
                 ({}) and cannot be upgraded without write access; ask its owner to run \
                 `glitchbook check` on it once",
                path.display(),
                schema_version()
            ))),
        };
    }
    conn.pragma_update(None, "query_only", "ON")?;
    Ok(conn)
}

/// `path` as the path part of an SQLite `file:` URI (`%`, `?`, `#` escaped).
fn uri_path(path: &Path) -> String {
    let abs = std::path::absolute(path).unwrap_or_else(|_| path.to_path_buf());
    let mut out = String::new();
    for c in abs.to_string_lossy().chars() {
        match c {
            '%' => out.push_str("%25"),
            '?' => out.push_str("%3f"),
            '#' => out.push_str("%23"),
            c => out.push(c),
        }
    }
    out
}

/// Apply every pending migration and the version bump in one immediate
/// transaction (so two processes cannot both migrate). An up-to-date
/// catalogue takes no write lock, so readers never wait for a writer here.
fn migrate(conn: &mut Connection) -> Result<()> {
    let current: i64 = conn.query_row("PRAGMA user_version", [], |r| r.get(0))?;
    if current >= schema_version() {
        return Ok(());
    }
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
        let err = open(&p).unwrap_err();
        assert!(
            matches!(
                crate::Error::find(&err),
                Some(crate::Error::SchemaTooNew { found: 999, .. })
            ),
            "{err}"
        );
    }

    #[test]
    fn ns_round_trip() {
        let t = 1_400_000_123.456_789;
        assert!((from_ns(to_ns(t).unwrap()) - t).abs() < 1e-6);
        // Exactly representable times come back bit-identical.
        for t in [1_400_000_010.25, 1_400_000_010.5, -1.5, 0.0, 1e9 + 0.125] {
            assert_eq!(from_ns(to_ns(t).unwrap()), t, "{t}");
        }
        assert_eq!(to_ns(1_400_000_010.25).unwrap(), 1_400_000_010_250_000_000);
        assert_eq!(to_ns(-1.5).unwrap(), -1_500_000_000);
        // Beyond ±9e9 s the nanoseconds would wrap (9.3e9 s was once stored
        // as -9146744073.7 s): refused, never wrapped.
        for t in [9.3e9, -9.3e9, 1e300, f64::INFINITY, f64::NAN] {
            assert!(to_ns(t).is_err(), "{t}");
        }
        assert_eq!(to_ns(9e9).unwrap(), 9_000_000_000_000_000_000);
    }

    #[test]
    fn utc_format() {
        let s = now_utc();
        assert_eq!(s.len(), 20);
        assert!(s.starts_with("20") && s.ends_with('Z'));
    }
}

#[cfg(test)]
mod tests_rw;
