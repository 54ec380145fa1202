//! Folding shard catalogues into one catalogue.
use super::{from_pairs, load_plan, now_utc, shard_db_path, TOOL_VERSION};
use crate::catalogue::to_ns;
use anyhow::{bail, Context, Result};
use rusqlite::{params, OptionalExtension};
use std::collections::HashMap;
use std::path::Path;

/// What [`merge`] did.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct MergeReport {
    /// Shards folded in by this call.
    pub merged: Vec<usize>,
    /// Shards already merged earlier (left alone).
    pub already: Vec<usize>,
    /// Shards without a catalogue (not run or failed).
    pub missing: Vec<usize>,
    /// Triggers read from the merged shards.
    pub n_triggers_in: usize,
    /// Edge triggers folded into a louder twin from the neighbouring shard.
    pub n_edge_duplicates: usize,
    /// Parameter or version mismatches merged because of `force`.
    pub forced: Vec<String>,
}

impl std::fmt::Display for MergeReport {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        writeln!(
            f,
            "merged {} shards ({} triggers in, {} edge twins folded); {} already merged; {} missing",
            self.merged.len(),
            self.n_triggers_in,
            self.n_edge_duplicates,
            self.already.len(),
            self.missing.len()
        )?;
        if !self.missing.is_empty() {
            writeln!(
                f,
                "missing shards (run them, then merge again): {:?}",
                self.missing
            )?;
        }
        for n in &self.forced {
            writeln!(f, "forced past a mismatch: {n}")?;
        }
        Ok(())
    }
}

struct ShardScanRow {
    id: i64,
    channel: String,
    role: String,
    rate_hz: Option<f64>,
    run_key: String,
    source_path: String,
    input_checksum: String,
    params_json: String,
    tool_version: String,
    created_utc: String,
    span: (i64, i64),
    n_triggers: i64,
}

/// Fold the shard catalogues of the plan in `dir` into the catalogue `into`
/// (created if needed), one transaction per shard.
///
/// - Shards whose scans used other parameters or another tool version than
///   the plan are refused unless `force` (then recorded in `merges`).
/// - Edge twins: two triggers of the same channel from different shards of
///   this plan whose `[t_start, t_end]` overlap and whose peak tiles overlap
///   in time and frequency are one trigger; the louder (higher SNR) is kept.
///   (Shards scan a margin beyond their edges, so twins are rare.)
/// - A shard already merged (same plan id and shard) is skipped, so merging
///   twice changes nothing.
///
/// # Errors
/// An unreadable plan or catalogue, a shard from another plan, or a
/// mismatch without `force`; shards merged before the error stay merged.
pub fn merge(dir: &Path, into: &Path, force: bool) -> Result<MergeReport> {
    let plan = load_plan(dir)?;
    let mut conn = crate::catalogue::open(into)?;
    let mut report = MergeReport::default();
    let expected: HashMap<&str, String> = plan
        .channels
        .iter()
        .map(|c| Ok((c.name.as_str(), serde_json::to_string(&c.params)?)))
        .collect::<Result<_>>()?;
    // Longest trigger already in the catalogue bounds the search for twins.
    let mut max_len_ns: i64 = conn.query_row(
        "SELECT COALESCE(MAX(t_end_ns - t_start_ns), 0) FROM triggers",
        [],
        |r| r.get(0),
    )?;
    for k in 0..plan.shards.len() {
        let db = shard_db_path(dir, k);
        if !db.exists() {
            report.missing.push(k);
            continue;
        }
        let done: Option<i64> = conn
            .query_row(
                "SELECT id FROM merges WHERE plan_id = ?1 AND shard = ?2",
                params![plan.plan_id, k as i64],
                |r| r.get(0),
            )
            .optional()?;
        if done.is_some() {
            report.already.push(k);
            continue;
        }
        // Open the shard read-only; its rows are copied scan by scan.
        let shard =
            rusqlite::Connection::open_with_flags(&db, rusqlite::OpenFlags::SQLITE_OPEN_READ_ONLY)
                .with_context(|| format!("opening shard catalogue {}", db.display()))?;
        let shard_schema: i64 = shard
            .query_row("PRAGMA user_version", [], |r| r.get(0))
            .with_context(|| {
                format!(
                    "{}: not a glitchbook shard catalogue (SQLite could not read it)",
                    db.display()
                )
            })?;
        if shard_schema != crate::catalogue::schema_version() {
            bail!(
                "{}: shard catalogue schema version {shard_schema}, but this glitchbook writes \
                 version {}; run the shard again with this glitchbook (refusing to merge)",
                db.display(),
                crate::catalogue::schema_version()
            );
        }
        let runs: Vec<(String, i64, String)> = shard
            .prepare("SELECT plan_id, shard, tool_version FROM shard_runs")
            .and_then(|mut st| {
                st.query_map([], |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)))?
                    .collect::<rusqlite::Result<_>>()
            })
            .with_context(|| format!("{}: not a glitchbook shard catalogue", db.display()))?;
        if runs.len() != 1 || runs[0].0 != plan.plan_id || runs[0].1 != k as i64 {
            bail!(
                "{}: not shard {k} of plan {} (shard_runs says {:?}); refusing to merge",
                db.display(),
                plan.plan_id,
                runs
            );
        }
        let shard_version = runs[0].2.clone();
        let scans: Vec<ShardScanRow> = shard
            .prepare(
                "SELECT s.id, c.name, c.role, c.rate_hz, s.run_key, s.source_path, s.input_checksum, \
                 s.params_json, s.tool_version, s.created_utc, s.span_start_ns, s.span_end_ns, \
                 s.n_triggers FROM scans s JOIN channels c ON c.id = s.channel_id ORDER BY s.id",
            )?
            .query_map([], |r| {
                Ok(ShardScanRow {
                    id: r.get(0)?,
                    channel: r.get(1)?,
                    role: r.get(2)?,
                    rate_hz: r.get(3)?,
                    run_key: r.get(4)?,
                    source_path: r.get(5)?,
                    input_checksum: r.get(6)?,
                    params_json: r.get(7)?,
                    tool_version: r.get(8)?,
                    created_utc: r.get(9)?,
                    span: (r.get(10)?, r.get(11)?),
                    n_triggers: r.get(12)?,
                })
            })?
            .collect::<rusqlite::Result<_>>()?;
        let mut notes = Vec::new();
        if shard_version != plan.tool_version {
            notes.push(format!(
                "tool version {shard_version} differs from the plan's {}",
                plan.tool_version
            ));
        }
        for s in &scans {
            if s.tool_version != plan.tool_version {
                notes.push(format!(
                    "channel {}: tool version {} differs from the plan's {}",
                    s.channel, s.tool_version, plan.tool_version
                ));
            }
            match expected.get(s.channel.as_str()) {
                None => notes.push(format!("channel {} is not in the plan", s.channel)),
                Some(p) if !same_params(p, &s.params_json) => notes.push(format!(
                    "channel {}: parameters {} differ from the plan's {}",
                    s.channel, s.params_json, p
                )),
                _ => {}
            }
        }
        if !notes.is_empty() && !force {
            return Err(crate::Error::invalid(
                "force",
                format!(
                    "is needed to merge {}: {}; refusing to merge without it",
                    db.display(),
                    notes.join("; ")
                ),
            )
            .into());
        }
        // Keep spans by channel name (a name may come from several bundles).
        let mut keep_by_channel: HashMap<&str, crate::segments::SegmentList> = HashMap::new();
        for c in &plan.shards[k].channels {
            let e = keep_by_channel.entry(c.name.as_str()).or_default();
            *e = e.union(&from_pairs(&c.keep));
        }

        let tx = conn.transaction()?;
        tx.execute(
            "INSERT INTO merges(plan_id, shard, shard_path, shard_tool_version, forced, \
             mismatch_note, n_scans, n_triggers_in, n_edge_duplicates, merged_utc, tool_version) \
             VALUES (?1, ?2, ?3, ?4, ?5, ?6, 0, 0, 0, ?7, ?8)",
            params![
                plan.plan_id,
                k as i64,
                db.display().to_string(),
                shard_version,
                i64::from(!notes.is_empty()),
                (!notes.is_empty()).then(|| notes.join("; ")),
                now_utc(),
                TOOL_VERSION
            ],
        )?;
        let merge_id = tx.last_insert_rowid();
        let (mut n_in, mut n_dup, mut n_scans) = (0usize, 0usize, 0i64);
        for s in &scans {
            tx.execute(
                "INSERT OR IGNORE INTO channels(name, role, rate_hz) VALUES (?1, ?2, ?3)",
                params![s.channel, s.role, s.rate_hz],
            )?;
            let ch_id: i64 = tx.query_row(
                "SELECT id FROM channels WHERE name = ?1",
                [&s.channel],
                |r| r.get(0),
            )?;
            let exists: Option<i64> = tx
                .query_row(
                    "SELECT id FROM scans WHERE run_key = ?1",
                    [&s.run_key],
                    |r| r.get(0),
                )
                .optional()?;
            if exists.is_some() {
                continue;
            }
            tx.execute(
                "INSERT INTO scans(channel_id, kind, run_key, source_path, input_checksum, \
                 params_json, tool_version, created_utc, span_start_ns, span_end_ns, n_triggers) \
                 VALUES (?1, 'scan', ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10)",
                params![
                    ch_id,
                    s.run_key,
                    s.source_path,
                    s.input_checksum,
                    s.params_json,
                    s.tool_version,
                    s.created_utc,
                    s.span.0,
                    s.span.1,
                    s.n_triggers
                ],
            )?;
            let scan_id = tx.last_insert_rowid();
            n_scans += 1;
            tx.execute(
                "INSERT INTO merged_scans(scan_id, merge_id) VALUES (?1, ?2)",
                params![scan_id, merge_id],
            )?;
            // Where the shard's scan read its samples (files and stamps).
            let data_json: Option<String> =
                shard.query_row("SELECT data_json FROM scans WHERE id = ?1", [s.id], |r| {
                    r.get(0)
                })?;
            tx.execute(
                "UPDATE scans SET data_json = ?1 WHERE id = ?2",
                params![data_json, scan_id],
            )?;
            type FileRow = (String, i64, i64, String);
            let files: Vec<FileRow> = shard
                .prepare(
                    "SELECT path, bytes, mtime_ns, checksum FROM scan_files WHERE scan_id = ?1",
                )?
                .query_map([s.id], |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?, r.get(3)?)))?
                .collect::<rusqlite::Result<_>>()?;
            for f in files {
                tx.execute(
                    "INSERT OR IGNORE INTO scan_files(scan_id, path, bytes, mtime_ns, checksum) \
                     VALUES (?1, ?2, ?3, ?4, ?5)",
                    params![scan_id, f.0, f.1, f.2, f.3],
                )?;
            }
            let segs: Vec<(i64, i64)> = shard
                .prepare("SELECT start_ns, end_ns FROM analysed_segments WHERE scan_id = ?1")?
                .query_map([s.id], |r| Ok((r.get(0)?, r.get(1)?)))?
                .collect::<rusqlite::Result<_>>()?;
            for (a, b) in segs {
                tx.execute(
                    "INSERT INTO analysed_segments(scan_id, start_ns, end_ns) VALUES (?1, ?2, ?3)",
                    params![scan_id, a, b],
                )?;
            }
            type Row = (i64, i64, i64, f64, f64, f64, f64, Option<f64>, f64, f64);
            let trigs: Vec<Row> = shard
                .prepare(
                    "SELECT t_peak_ns, t_start_ns, t_end_ns, f_peak_hz, f_low_hz, f_high_hz, snr, \
                     q, energy, COALESCE(snr_eq, snr) FROM triggers WHERE scan_id = ?1 \
                     ORDER BY t_peak_ns",
                )?
                .query_map([s.id], |r| {
                    Ok((
                        r.get(0)?,
                        r.get(1)?,
                        r.get(2)?,
                        r.get(3)?,
                        r.get(4)?,
                        r.get(5)?,
                        r.get(6)?,
                        r.get(7)?,
                        r.get(8)?,
                        r.get(9)?,
                    ))
                })?
                .collect::<rusqlite::Result<_>>()?;
            n_in += trigs.len();
            let shard_max = trigs.iter().map(|t| t.2 - t.1).max().unwrap_or(0);
            max_len_ns = max_len_ns.max(shard_max);
            // The keep span's segments in ns, converted once (checked).
            let keep_ns: Option<Vec<(i64, i64)>> = keep_by_channel
                .get(s.channel.as_str())
                .map(|kl| {
                    kl.segments()
                        .iter()
                        .map(|g| Ok((to_ns(g.start)?, to_ns(g.end)?)))
                        .collect::<crate::Result<_>>()
                })
                .transpose()?;
            let mut twins = tx.prepare_cached(
                "SELECT t.id, t.snr, t.t_peak_ns, t.f_peak_hz, t.q FROM triggers t \
                 JOIN merged_scans ms ON ms.scan_id = t.scan_id \
                 JOIN merges m ON m.id = ms.merge_id \
                 WHERE m.plan_id = ?1 AND t.channel_id = ?2 AND t.scan_id != ?3 \
                 AND t.t_peak_ns BETWEEN ?4 AND ?5 \
                 AND t.t_start_ns <= ?6 AND t.t_end_ns >= ?7",
            )?;
            let mut ins = tx.prepare_cached(
                "INSERT INTO triggers(scan_id, channel_id, t_peak_ns, t_start_ns, t_end_ns, \
                 f_peak_hz, f_low_hz, f_high_hz, snr, q, energy, snr_eq) \
                 VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12)",
            )?;
            let mut del = tx.prepare_cached("DELETE FROM triggers WHERE id = ?1")?;
            for t in &trigs {
                // Only triggers within one longest-trigger length of an edge
                // of this shard's keep span can have a twin.
                let near_edge = keep_ns.as_ref().is_none_or(|kl| {
                    kl.iter().any(|&(a, b)| {
                        let w = max_len_ns;
                        (t.1 - w < a && t.2 + w >= a) || (t.1 - w <= b && t.2 + w > b)
                    })
                });
                if near_edge {
                    let found: Vec<(i64, f64)> = twins
                        .query_map(
                            params![
                                plan.plan_id,
                                ch_id,
                                scan_id,
                                t.1 - max_len_ns,
                                t.2 + max_len_ns,
                                t.2,
                                t.1
                            ],
                            |r| {
                                Ok((
                                    r.get::<_, i64>(0)?,
                                    r.get::<_, f64>(1)?,
                                    r.get::<_, i64>(2)?,
                                    r.get::<_, f64>(3)?,
                                    r.get::<_, Option<f64>>(4)?,
                                ))
                            },
                        )?
                        .collect::<rusqlite::Result<Vec<_>>>()?
                        .into_iter()
                        .filter(|y| peak_tiles_overlap((t.0, t.3, t.7), (y.2, y.3, y.4)))
                        .map(|y| (y.0, y.1))
                        .collect();
                    if !found.is_empty() {
                        if found.iter().all(|f| t.6 > f.1) {
                            // The incoming trigger is louder than its twins.
                            for f in &found {
                                del.execute([f.0])?;
                            }
                            n_dup += found.len();
                        } else {
                            n_dup += 1;
                            continue;
                        }
                    }
                }
                ins.execute(params![
                    scan_id, ch_id, t.0, t.1, t.2, t.3, t.4, t.5, t.6, t.7, t.8, t.9
                ])?;
            }
        }
        tx.execute(
            "UPDATE merges SET n_scans = ?1, n_triggers_in = ?2, n_edge_duplicates = ?3 WHERE id = ?4",
            params![n_scans, n_in as i64, n_dup as i64, merge_id],
        )?;
        tx.commit()
            .with_context(|| format!("merging {} into {}", db.display(), into.display()))?;
        report.merged.push(k);
        report.n_triggers_in += n_in;
        report.n_edge_duplicates += n_dup;
        report
            .forced
            .extend(notes.into_iter().map(|n| format!("shard {k}: {n}")));
    }
    Ok(report)
}

/// Whether the peak tiles of two triggers overlap in time and frequency
/// (the suppression test of `trigger::cluster_tiles`): `(t_peak_ns, f_peak,
/// q)`; with an unknown Q the extents' overlap alone decides.
fn peak_tiles_overlap(x: (i64, f64, Option<f64>), y: (i64, f64, Option<f64>)) -> bool {
    let (Some(qx), Some(qy)) = (x.2, y.2) else {
        return true;
    };
    let hd = |q: f64, f: f64| 2.0 * crate::tf::sigma_t(q, f);
    let hb = |q: f64, f: f64| 2.0 * f / q;
    let dt = (x.0 - y.0).abs() as f64 * 1e-9;
    dt < hd(qx, x.1) + hd(qy, y.1) && (x.1 - y.1).abs() < hb(qx, x.1) + hb(qy, y.1)
}

/// Parameter JSON equality by value (key order and float formatting aside).
fn same_params(a: &str, b: &str) -> bool {
    match (
        serde_json::from_str::<serde_json::Value>(a),
        serde_json::from_str::<serde_json::Value>(b),
    ) {
        (Ok(x), Ok(y)) => x == y,
        _ => a == b,
    }
}
