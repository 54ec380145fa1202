//! Writes: channel upsert, one scan (or import) with its analysed segments
//! and triggers. Every function here takes an open transaction; the caller
//! commits once per command, so an error anywhere leaves nothing written.

use super::to_ns;
use crate::io::Role;
use crate::scan::ChannelScan;
use crate::segments::SegmentList;
use crate::trigger::Trigger;
use anyhow::{bail, Context, Result};
use rusqlite::{params, Connection, OptionalExtension, Transaction};
use std::path::{Path, PathBuf};
use xxhash_rust::xxh3::Xxh3;

/// What produced a `scans` row.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ScanKind {
    /// A scan of channel data by glitchbook.
    Scan,
    /// Triggers imported from an external CSV file.
    Import,
}

impl ScanKind {
    /// The value stored in `scans.kind`.
    pub fn as_str(self) -> &'static str {
        match self {
            ScanKind::Scan => "scan",
            ScanKind::Import => "import",
        }
    }
}

/// The text stored in `channels.role`.
pub(crate) fn role_str(role: Role) -> &'static str {
    match role {
        Role::Target => "target",
        Role::Aux => "aux",
    }
}

/// Everything one `scans` row and its children need.
#[derive(Debug, Clone)]
pub struct ScanRecord<'a> {
    /// Channel name (free-form text, stored verbatim).
    pub channel: &'a str,
    /// Channel role.
    pub role: Role,
    /// Sample rate \[Hz\]; None when unknown (imports).
    pub rate_hz: Option<f64>,
    /// Scan or import.
    pub kind: ScanKind,
    /// Bundle directory or CSV file, as given by the user.
    pub source_path: &'a str,
    /// Hex xxh3-128 of the input samples or CSV bytes.
    pub input_checksum: &'a str,
    /// Resolved parameters as JSON.
    pub params_json: &'a str,
    /// Time searched (or covered, for imports).
    pub analysed: &'a SegmentList,
    /// Triggers found.
    pub triggers: &'a [Trigger],
}

/// An import of external triggers, ready to write.
#[derive(Debug, Clone)]
pub struct ImportRecord {
    /// Channel name.
    pub channel: String,
    /// Channel role.
    pub role: Role,
    /// The CSV file, as given.
    pub source_path: String,
    /// Hex xxh3-128 of the CSV bytes.
    pub input_checksum: String,
    /// Analysed segments (from `--segments`, or the span of the triggers).
    pub analysed: SegmentList,
    /// How the segments were obtained, recorded in `params_json`
    /// (`"file"` or `"trigger_span"`).
    pub segments_source: String,
    /// The triggers read.
    pub triggers: Vec<Trigger>,
}

/// Result of writing one scan.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum InsertOutcome {
    /// New rows written.
    Inserted {
        /// Id of the new `scans` row.
        scan_id: i64,
        /// Number of triggers written.
        n_triggers: usize,
    },
    /// A scan with the same run key exists: nothing written.
    Skipped {
        /// Id of the existing `scans` row.
        scan_id: i64,
    },
}

impl InsertOutcome {
    /// The message the CLI prints for a skipped scan.
    pub const SKIPPED_MESSAGE: &'static str =
        "already scanned with the same data and parameters: skipped";
}

/// The idempotency key of a scan: hex xxh3-128 of channel name, input
/// checksum, analysed segments (integer ns), resolved parameters JSON and
/// kind, each length-prefixed so no two different inputs share a byte stream.
pub fn run_key(
    channel: &str,
    input_checksum: &str,
    analysed: &SegmentList,
    params_json: &str,
    kind: ScanKind,
) -> crate::Result<String> {
    let mut h = Xxh3::new();
    let mut field = |bytes: &[u8]| {
        h.update(&(bytes.len() as u64).to_le_bytes());
        h.update(bytes);
    };
    field(channel.as_bytes());
    field(input_checksum.as_bytes());
    let mut segs = Vec::with_capacity(16 * analysed.segments().len());
    for s in analysed.segments() {
        segs.extend_from_slice(&to_ns(s.start)?.to_le_bytes());
        segs.extend_from_slice(&to_ns(s.end)?.to_le_bytes());
    }
    field(&segs);
    field(params_json.as_bytes());
    field(kind.as_str().as_bytes());
    Ok(format!("{:032x}", h.digest128()))
}

/// Find or create the channel `name`; returns its id.
///
/// # Errors
/// An existing channel with another role, or with another known sample
/// rate, is refused (a rate unknown so far is filled in).
pub fn upsert_channel(
    tx: &Transaction,
    name: &str,
    role: Role,
    rate_hz: Option<f64>,
) -> Result<i64> {
    let existing: Option<(i64, String, Option<f64>)> = tx
        .prepare_cached("SELECT id, role, rate_hz FROM channels WHERE name = ?1")?
        .query_row([name], |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)))
        .optional()?;
    let role_s = role_str(role);
    match existing {
        None => {
            tx.prepare_cached("INSERT INTO channels (name, role, rate_hz) VALUES (?1, ?2, ?3)")?
                .execute(params![name, role_s, rate_hz])?;
            Ok(tx.last_insert_rowid())
        }
        Some((id, old_role, old_rate)) => {
            if old_role != role_s {
                bail!(
                    "channel {name:?} is already in the catalogue as {old_role}; \
                     refusing to record it as {role_s}"
                );
            }
            match (old_rate, rate_hz) {
                (Some(a), Some(b)) if a != b => bail!(
                    "channel {name:?} is already in the catalogue with rate {a} Hz; \
                     refusing data at {b} Hz"
                ),
                (None, Some(b)) => {
                    tx.prepare_cached("UPDATE channels SET rate_hz = ?1 WHERE id = ?2")?
                        .execute(params![b, id])?;
                }
                _ => {}
            }
            Ok(id)
        }
    }
}

/// Write one scan: channel upsert, `scans` row, analysed segments and
/// triggers. Skips (writing nothing) when the run key already exists.
///
/// # Errors
/// Channel role/rate conflicts (see [`upsert_channel`]), a non-finite
/// trigger field, or any SQLite error.
pub fn insert_scan(tx: &Transaction, rec: &ScanRecord) -> Result<InsertOutcome> {
    let key = run_key(
        rec.channel,
        rec.input_checksum,
        rec.analysed,
        rec.params_json,
        rec.kind,
    )?;
    let existing: Option<i64> = tx
        .prepare_cached("SELECT id FROM scans WHERE run_key = ?1")?
        .query_row([&key], |r| r.get(0))
        .optional()?;
    if let Some(scan_id) = existing {
        return Ok(InsertOutcome::Skipped { scan_id });
    }
    let channel_id = upsert_channel(tx, rec.channel, rec.role, rec.rate_hz)?;
    let (span_start, span_end) = match rec.analysed.extent() {
        Some(s) => (to_ns(s.start)?, to_ns(s.end)?),
        None => {
            let lo = rec
                .triggers
                .iter()
                .map(|t| t.t_start)
                .fold(f64::NAN, f64::min);
            let hi = rec
                .triggers
                .iter()
                .map(|t| t.t_end)
                .fold(f64::NAN, f64::max);
            if lo.is_finite() && hi.is_finite() {
                (to_ns(lo)?, to_ns(hi)?)
            } else {
                (0, 0)
            }
        }
    };
    tx.prepare_cached(
        "INSERT INTO scans (channel_id, kind, run_key, source_path, input_checksum, params_json,
                            tool_version, created_utc, span_start_ns, span_end_ns, n_triggers)
         VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, strftime('%Y-%m-%dT%H:%M:%fZ', 'now'), ?8, ?9, ?10)",
    )?
    .execute(params![
        channel_id,
        rec.kind.as_str(),
        key,
        rec.source_path,
        rec.input_checksum,
        rec.params_json,
        env!("CARGO_PKG_VERSION"),
        span_start,
        span_end,
        rec.triggers.len() as i64,
    ])?;
    let scan_id = tx.last_insert_rowid();
    {
        let mut st = tx.prepare_cached(
            "INSERT INTO analysed_segments (scan_id, start_ns, end_ns) VALUES (?1, ?2, ?3)",
        )?;
        for s in rec.analysed.segments() {
            let (a, b) = (to_ns(s.start)?, to_ns(s.end)?);
            if b > a {
                st.execute(params![scan_id, a, b])?;
            }
        }
    }
    insert_triggers(tx, scan_id, channel_id, rec.triggers)?;
    supersede_earlier(tx, scan_id, channel_id, rec.analysed)?;
    Ok(InsertOutcome::Inserted {
        scan_id,
        n_triggers: rec.triggers.len(),
    })
}

/// The rule for time scanned twice: the latest scan (or import) of a
/// channel is the one listed for the time it analysed. Earlier triggers of
/// the channel whose peak lies in the new scan's analysed segments move to
/// `superseded_triggers` (kept with their id and values, and the id of the
/// scan that replaced them; their family memberships and fingerprints go
/// with them out of the listings); so do earlier triggers just outside that
/// time that overlap a new trigger in time and frequency (one event that
/// straddles the edge, seen by both scans); and an earlier scan whose analysed time
/// the new one covers entirely is marked `superseded_by`. So overlapping
/// scans never list a trigger twice, and the analysed time (the union over
/// scans) and the triggers agree. Returns the number of triggers moved.
///
/// # Errors
/// SQLite errors.
pub fn supersede_earlier(
    tx: &Transaction,
    scan_id: i64,
    channel_id: i64,
    analysed: &SegmentList,
) -> Result<usize> {
    let mut moved = 0usize;
    {
        let mut copy = tx.prepare_cached(
            "INSERT INTO superseded_triggers (id, scan_id, channel_id, t_peak_ns, t_start_ns,
                 t_end_ns, f_peak_hz, f_low_hz, f_high_hz, snr, q, energy, snr_eq, superseded_by)
             SELECT id, scan_id, channel_id, t_peak_ns, t_start_ns, t_end_ns, f_peak_hz,
                 f_low_hz, f_high_hz, snr, q, energy, snr_eq, ?1 FROM triggers
             WHERE channel_id = ?2 AND scan_id != ?1 AND t_peak_ns >= ?3 AND t_peak_ns < ?4",
        )?;
        let mut del = tx.prepare_cached(
            "DELETE FROM triggers WHERE channel_id = ?2 AND scan_id != ?1
             AND t_peak_ns >= ?3 AND t_peak_ns < ?4",
        )?;
        for s in analysed.segments() {
            let (a, b) = (to_ns(s.start)?, to_ns(s.end)?);
            moved += copy.execute(params![scan_id, channel_id, a, b])?;
            del.execute(params![scan_id, channel_id, a, b])?;
        }
    }
    // Events that straddle an edge of the new analysed time: an earlier
    // trigger (peak outside) that overlaps a new trigger in time and
    // frequency is the same event seen by both scans; the new one stays.
    if let Some(ext) = analysed.extent() {
        let w: i64 = tx
            .prepare_cached(
                "SELECT COALESCE(MAX(t_end_ns - t_start_ns), 0) FROM triggers WHERE scan_id = ?1",
            )?
            .query_row([scan_id], |r| r.get(0))?;
        let (a, b) = (to_ns(ext.start)? - w, to_ns(ext.end)? + w);
        let same_event = "FROM triggers o WHERE o.channel_id = ?2 AND o.scan_id != ?1 \
             AND o.t_peak_ns BETWEEN ?3 AND ?4 AND EXISTS (SELECT 1 FROM triggers n \
             WHERE n.channel_id = ?2 AND n.scan_id = ?1 \
             AND n.t_peak_ns BETWEEN o.t_start_ns - ?5 AND o.t_end_ns + ?5 \
             AND n.t_start_ns <= o.t_end_ns AND n.t_end_ns >= o.t_start_ns \
             AND n.f_low_hz <= o.f_high_hz AND n.f_high_hz >= o.f_low_hz)";
        moved += tx
            .prepare_cached(&format!(
                "INSERT INTO superseded_triggers (id, scan_id, channel_id, t_peak_ns, t_start_ns,
                     t_end_ns, f_peak_hz, f_low_hz, f_high_hz, snr, q, energy, snr_eq, superseded_by)
                 SELECT o.id, o.scan_id, o.channel_id, o.t_peak_ns, o.t_start_ns, o.t_end_ns,
                     o.f_peak_hz, o.f_low_hz, o.f_high_hz, o.snr, o.q, o.energy, o.snr_eq, ?1 {same_event}"
            ))?
            .execute(params![scan_id, channel_id, a, b, w])?;
        tx.prepare_cached(&format!(
            "DELETE FROM triggers WHERE id IN (SELECT o.id {same_event})"
        ))?
        .execute(params![scan_id, channel_id, a, b, w])?;
    }
    // Earlier scans now wholly covered.
    let earlier: Vec<i64> = tx
        .prepare_cached(
            "SELECT id FROM scans WHERE channel_id = ?1 AND id != ?2 AND superseded_by IS NULL",
        )?
        .query_map(params![channel_id, scan_id], |r| r.get(0))?
        .collect::<rusqlite::Result<_>>()?;
    for id in earlier {
        let segs = crate::catalogue::query::scan_segments(tx, id)?;
        if !segs.is_empty() && segs.difference(analysed).total() <= 1e-9 {
            tx.prepare_cached("UPDATE scans SET superseded_by = ?1 WHERE id = ?2")?
                .execute(params![scan_id, id])?;
        }
    }
    Ok(moved)
}

/// Record where a scan's samples came from: the channel's data description
/// (`scans.data_json`) and a [`crate::io::FileStamp`] of every file
/// (`scan_files`; files that do not exist, such as the virtual names of
/// samples scanned from memory, are not stamped).
///
/// # Errors
/// An unreadable file, or SQLite errors.
pub fn record_scan_files(
    tx: &Transaction,
    scan_id: i64,
    spec: &crate::io::ChannelSpec,
) -> Result<()> {
    tx.prepare_cached("UPDATE scans SET data_json = ?1 WHERE id = ?2")?
        .execute(params![crate::io::source::spec_json(spec), scan_id])?;
    let mut st = tx.prepare_cached(
        "INSERT OR IGNORE INTO scan_files (scan_id, path, bytes, mtime_ns, checksum)
         VALUES (?1, ?2, ?3, ?4, ?5)",
    )?;
    // A file that does not exist (samples scanned from memory under a
    // virtual name) has nothing to stamp; rereading it fails naming it.
    for f in spec.files.iter().filter(|f| f.exists()) {
        let stamp = crate::io::FileStamp::of(f)?;
        st.execute(params![
            scan_id,
            stamp.path.display().to_string(),
            stamp.bytes as i64,
            stamp.mtime_ns,
            stamp.checksum
        ])?;
    }
    Ok(())
}

/// Insert triggers of one scan (row mapping of the `triggers` table).
/// A non-finite `q` is stored as NULL (unknown).
fn insert_triggers(
    tx: &Transaction,
    scan_id: i64,
    channel_id: i64,
    triggers: &[Trigger],
) -> Result<()> {
    let mut st = tx.prepare_cached(
        "INSERT INTO triggers (scan_id, channel_id, t_peak_ns, t_start_ns, t_end_ns,
                               f_peak_hz, f_low_hz, f_high_hz, snr, q, energy, snr_eq)
         VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12)",
    )?;
    for (i, t) in triggers.iter().enumerate() {
        let fields = [
            ("t_peak", t.t_peak),
            ("t_start", t.t_start),
            ("t_end", t.t_end),
            ("f_peak", t.f_peak),
            ("f_low", t.f_low),
            ("f_high", t.f_high),
            ("snr", t.snr),
            ("snr_eq", t.snr_eq),
            ("energy", t.energy),
        ];
        if let Some((name, v)) = fields.iter().find(|(_, v)| !v.is_finite()) {
            bail!(
                "trigger {} (t_peak {}): field {name} is {v}",
                i + 1,
                t.t_peak
            );
        }
        let q = t.q.is_finite().then_some(t.q);
        st.execute(params![
            scan_id,
            channel_id,
            to_ns(t.t_peak)?,
            to_ns(t.t_start)?,
            to_ns(t.t_end)?,
            t.f_peak,
            t.f_low,
            t.f_high,
            t.snr,
            q,
            t.energy,
            t.snr_eq,
        ])?;
    }
    Ok(())
}

/// Write the result of [`crate::scan::scan_channel`]. `source_path` is the
/// bundle directory as given by the user.
///
/// # Errors
/// As [`insert_scan`].
pub fn insert_channel_scan(
    tx: &Transaction,
    scan: &ChannelScan,
    source_path: &Path,
) -> Result<InsertOutcome> {
    let params_json = serde_json::to_string(&scan.params)?;
    let source = source_path.display().to_string();
    let outcome = insert_scan(
        tx,
        &ScanRecord {
            channel: &scan.channel.name,
            role: scan.channel.role,
            rate_hz: Some(scan.channel.rate),
            kind: ScanKind::Scan,
            source_path: &source,
            input_checksum: &scan.input_checksum,
            params_json: &params_json,
            analysed: &scan.analysed,
            triggers: &scan.triggers,
        },
    )
    .with_context(|| format!("recording scan of channel {:?}", scan.channel.name))?;
    if let InsertOutcome::Inserted { scan_id, .. } = outcome {
        record_scan_files(tx, scan_id, &scan.channel)
            .with_context(|| format!("recording the files of channel {:?}", scan.channel.name))?;
    }
    Ok(outcome)
}

/// Record channel scans, each with the bundle directory it was read from
/// (stored as the scan's source path: later commands reopen the data
/// there), in one immediate transaction: [`insert_channel_scan`] for each,
/// then `also` (e.g. a provenance row) in the same transaction, then commit.
/// All or nothing. Scans already stored (same [`run_key`]) are skipped.
/// The path `scan`, `demo` and shard runs share.
///
/// # Errors
/// As [`insert_scan`], or whatever `also` returns; nothing is written then.
pub fn record_scans(
    conn: &mut Connection,
    scans: &[(ChannelScan, PathBuf)],
    also: impl FnOnce(&Transaction) -> Result<()>,
) -> Result<Vec<InsertOutcome>> {
    // Checksum the files before taking the write lock (cached for the insert).
    for (scan, _) in scans {
        for f in scan.channel.files.iter().filter(|f| f.exists()) {
            crate::io::FileStamp::of(f)?;
        }
    }
    let tx = conn.transaction_with_behavior(rusqlite::TransactionBehavior::Immediate)?;
    let mut out = Vec::with_capacity(scans.len());
    for (scan, bundle_dir) in scans {
        out.push(insert_channel_scan(&tx, scan, bundle_dir)?);
    }
    also(&tx)?;
    tx.commit()?;
    Ok(out)
}

/// Write an import of external triggers (kind `import`).
///
/// # Errors
/// As [`insert_scan`].
pub fn import_triggers(tx: &Transaction, rec: &ImportRecord) -> Result<InsertOutcome> {
    let params_json = serde_json::json!({ "segments": rec.segments_source }).to_string();
    insert_scan(
        tx,
        &ScanRecord {
            channel: &rec.channel,
            role: rec.role,
            rate_hz: None,
            kind: ScanKind::Import,
            source_path: &rec.source_path,
            input_checksum: &rec.input_checksum,
            params_json: &params_json,
            analysed: &rec.analysed,
            triggers: &rec.triggers,
        },
    )
    .with_context(|| format!("recording import of {}", rec.source_path))
}
