//! SIGKILL at random moments during `scan`, `cluster` and `label` on a small
//! demo bundle (ignored by default; `.ci/run` runs it): after every kill the
//! catalogue passes `PRAGMA integrity_check` and holds each scan, clustering
//! run and label change whole or not at all, and a final re-run completes
//! the work with no duplicates.
use crate::cli_util::Dir;
use rusqlite::Connection;
use std::time::{Duration, Instant};

const N_KILLS: usize = 20;

/// xorshift64* in [0, 1).
fn next(state: &mut u64) -> f64 {
    *state ^= *state >> 12;
    *state ^= *state << 25;
    *state ^= *state >> 27;
    (state.wrapping_mul(0x2545_f491_4f6c_dd1d) >> 11) as f64 / (1u64 << 53) as f64
}

fn one(conn: &Connection, sql: &str) -> i64 {
    conn.query_row(sql, [], |r| r.get::<_, Option<i64>>(0))
        .unwrap_or_else(|e| panic!("{sql}: {e}"))
        .unwrap_or(0)
}

/// Integrity and all-or-nothing checks on whatever the kills left.
fn assert_consistent(db: &std::path::Path) {
    if !db.exists() {
        return;
    }
    let conn = Connection::open(db).unwrap();
    let ic: String = conn
        .query_row("PRAGMA integrity_check", [], |r| r.get(0))
        .unwrap();
    assert_eq!(ic, "ok");
    if one(&conn, "PRAGMA user_version") == 0 {
        assert_eq!(
            one(
                &conn,
                "SELECT COUNT(*) FROM sqlite_master WHERE type = 'table'"
            ),
            0
        );
        return;
    }
    // Every scan holds exactly the triggers it announces.
    let half = one(
        &conn,
        "SELECT COUNT(*) FROM scans s WHERE s.n_triggers != \
         (SELECT COUNT(*) FROM triggers t WHERE t.scan_id = s.id)",
    );
    assert_eq!(half, 0, "a scan is half written");
    // One scan per channel at most (re-runs are skipped, never duplicated).
    let dup = one(&conn, "SELECT COUNT(*) FROM (SELECT channel_id FROM scans GROUP BY channel_id HAVING COUNT(*) > 1)");
    assert_eq!(dup, 0, "a channel was scanned twice");
    // Memberships belong to a recorded clustering run; families to runs.
    let orphan = one(
        &conn,
        "SELECT COUNT(*) FROM family_members m WHERE NOT EXISTS (SELECT 1 FROM cluster_runs r WHERE r.id = m.run_id)",
    );
    assert_eq!(orphan, 0, "memberships without their clustering run");
    // A family's label is the last one its history records.
    let mismatch = one(
        &conn,
        "SELECT COUNT(*) FROM families f WHERE f.label IS NOT (SELECT h.new_label FROM label_history h \
         WHERE h.family_id = f.id ORDER BY h.id DESC LIMIT 1) AND EXISTS \
         (SELECT 1 FROM label_history h WHERE h.family_id = f.id)",
    );
    assert_eq!(mismatch, 0, "a label without its history (or the reverse)");
}

/// Run `args` once to completion and return its duration; then start it
/// again and again, SIGKILL it at a random moment within that duration, and
/// check the catalogue after each kill. Returns how many kills landed.
fn kill_loop(d: &Dir, args: &dyn Fn(usize) -> Vec<String>, seed: &mut u64) -> usize {
    let t = Instant::now();
    let first: Vec<String> = args(0);
    let refs: Vec<&str> = first.iter().map(String::as_str).collect();
    d.ok(&refs);
    let full = t.elapsed().as_secs_f64();
    let (mut killed, mut attempts) = (0, 0);
    while killed < N_KILLS && attempts < 10 * N_KILLS {
        attempts += 1;
        let a = args(attempts);
        let refs: Vec<&str> = a.iter().map(String::as_str).collect();
        let mut child = d
            .cmd(&refs)
            .stdout(std::process::Stdio::null())
            .spawn()
            .unwrap();
        std::thread::sleep(Duration::from_secs_f64(0.8 * full * next(seed)));
        if child.try_wait().unwrap().is_none() {
            child.kill().unwrap(); // SIGKILL on Unix
            killed += 1;
        }
        child.wait().unwrap();
        assert_consistent(&d.db());
    }
    eprintln!(
        "  {:?}: full run {full:.2} s, {killed} kills in {attempts} attempts",
        first[0]
    );
    killed
}

#[test]
#[ignore]
fn sigkill_during_scan_cluster_and_label() {
    let d = Dir::new();
    let demo = d.path().join("demo");
    let out = std::process::Command::new(crate::cli_util::BIN)
        .args(["--quiet", "demo-data", "--out"])
        .arg(&demo)
        .args(["--hours", "0.1"])
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let bundle = demo.display().to_string();
    let segs = demo.join("segments.txt").display().to_string();
    let mut seed = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .unwrap()
        .as_nanos() as u64
        | 1;
    eprintln!("pipeline kill test, seed {seed}");

    // Scan: each attempt starts from an empty catalogue (a finished scan
    // would make the next one a quick skip); a full run into a reference
    // catalogue gives the expected trigger count.
    let reference = Dir::new();
    reference.ok(&["--quiet", "scan", &bundle, "--segments", &segs]);
    let n_ref = one(
        &Connection::open(reference.db()).unwrap(),
        "SELECT COUNT(*) FROM triggers",
    );
    let scan_args = |_: usize| -> Vec<String> {
        vec![
            "--quiet".into(),
            "scan".into(),
            bundle.clone(),
            "--segments".into(),
            segs.clone(),
        ]
    };
    let mut killed = 0;
    let mut attempts = 0;
    let full = {
        let t = Instant::now();
        let scratch = Dir::new();
        scratch.ok(&["--quiet", "scan", &bundle, "--segments", &segs]);
        t.elapsed().as_secs_f64()
    };
    while killed < N_KILLS && attempts < 4 * N_KILLS {
        attempts += 1;
        if d.db().exists() {
            for suffix in ["", "-wal", "-shm"] {
                let _ = std::fs::remove_file(format!("{}{suffix}", d.db().display()));
            }
        }
        let a = scan_args(attempts);
        let refs: Vec<&str> = a.iter().map(String::as_str).collect();
        let mut child = d
            .cmd(&refs)
            .stdout(std::process::Stdio::null())
            .spawn()
            .unwrap();
        std::thread::sleep(Duration::from_secs_f64(full * next(&mut seed)));
        if child.try_wait().unwrap().is_none() {
            child.kill().unwrap();
            killed += 1;
        }
        child.wait().unwrap();
        assert_consistent(&d.db());
        // A kill before the schema was created leaves an empty file.
        let n = match d.db().exists().then(|| Connection::open(d.db()).unwrap()) {
            Some(c) if one(&c, "PRAGMA user_version") > 0 => {
                one(&c, "SELECT COUNT(*) FROM triggers")
            }
            _ => 0,
        };
        assert!(n == 0 || n == n_ref, "scan left {n} of {n_ref} triggers");
    }
    eprintln!("  scan: full run {full:.2} s, {killed} kills in {attempts} attempts");
    assert!(killed >= N_KILLS / 2, "too few kills landed: {killed}");
    // A re-run completes the work; another adds nothing.
    d.ok(&refs_of(&scan_args(0)));
    d.ok(&refs_of(&scan_args(0)));
    let conn = Connection::open(d.db()).unwrap();
    assert_eq!(one(&conn, "SELECT COUNT(*) FROM triggers"), n_ref);
    drop(conn);

    // Cluster (different seeds make new runs) and label.
    let k = kill_loop(
        &d,
        &|i| {
            vec![
                "--quiet".into(),
                "cluster".into(),
                "--seed".into(),
                i.to_string(),
                "--min-snr".into(),
                "6".into(),
            ]
        },
        &mut seed,
    );
    assert!(k >= N_KILLS / 2, "too few kills landed in cluster: {k}");
    let fam = one(
        &Connection::open(d.db()).unwrap(),
        "SELECT MIN(id) FROM families WHERE status = 'active'",
    );
    let fam = fam.to_string();
    let k = kill_loop(
        &d,
        &|i| {
            vec![
                "--quiet".into(),
                "label".into(),
                fam.clone(),
                format!("name-{i}"),
            ]
        },
        &mut seed,
    );
    eprintln!("  label kills landed: {k} (a label is one short transaction)");
    assert_consistent(&d.db());
}

fn refs_of(v: &[String]) -> Vec<&str> {
    v.iter().map(String::as_str).collect()
}
