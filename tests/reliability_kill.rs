//! SIGKILL during `import` at random moments (≥ 20 times): after each kill
//! the catalogue passes `PRAGMA integrity_check`, every import is all or
//! nothing, and a final re-run completes without duplicates.
//!
//! Ignored by default (about a minute); `.ci/run` runs it with
//! `cargo test --test tests reliability_kill -- --ignored`.
use crate::cli_util::{trigger_csv, Dir};
use std::time::{Duration, Instant};

const N_ROWS: usize = 100_000;
const N_KILLS: usize = 20;

/// xorshift64* — enough randomness for kill moments; the seed is printed.
fn next(state: &mut u64) -> f64 {
    *state ^= *state >> 12;
    *state ^= *state << 25;
    *state ^= *state >> 27;
    (state.wrapping_mul(0x2545_f491_4f6c_dd1d) >> 11) as f64 / (1u64 << 53) as f64
}

/// Integrity and all-or-nothing: each scans row has exactly its trigger
/// count and at least one analysed segment; no channel lacks a scan.
fn assert_consistent(d: &Dir) -> i64 {
    let conn = rusqlite::Connection::open(d.db()).unwrap();
    let ic: String = conn
        .query_row("PRAGMA integrity_check", [], |r| r.get(0))
        .unwrap();
    assert_eq!(ic, "ok");
    // Killed while creating the catalogue: the migration transaction rolled
    // back, leaving an empty (version 0) file that the next open migrates.
    let version: i64 = conn
        .query_row("PRAGMA user_version", [], |r| r.get(0))
        .unwrap();
    let n_tables: i64 = conn
        .query_row(
            "SELECT COUNT(*) FROM sqlite_master WHERE type = 'table'",
            [],
            |r| r.get(0),
        )
        .unwrap();
    if version == 0 {
        assert_eq!(n_tables, 0, "half-applied migration");
        return 0;
    }
    let mut st = conn
        .prepare(
            "SELECT s.id, s.n_triggers, (SELECT COUNT(*) FROM triggers t WHERE t.scan_id = s.id), \
             (SELECT COUNT(*) FROM analysed_segments a WHERE a.scan_id = s.id) FROM scans s",
        )
        .unwrap();
    let rows: Vec<(i64, i64, i64, i64)> = st
        .query_map([], |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?, r.get(3)?)))
        .unwrap()
        .map(|r| r.unwrap())
        .collect();
    for (id, n, stored, segs) in &rows {
        assert_eq!(*n, N_ROWS as i64, "scan {id}");
        assert_eq!(n, stored, "scan {id} half written");
        assert!(*segs >= 1, "scan {id} without segments");
    }
    let orphans: i64 = conn
        .query_row(
            "SELECT COUNT(*) FROM channels c WHERE NOT EXISTS \
             (SELECT 1 FROM scans s WHERE s.channel_id = c.id)",
            [],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(orphans, 0, "channel row without its import");
    rows.len() as i64
}

#[test]
#[ignore]
fn sigkill_during_import() {
    let d = Dir::new();
    d.write("big.csv", &trigger_csv(N_ROWS, 1_400_000_000.0));
    d.write("seg.txt", "1400000000 1400100000\n");
    // Calibrate: one full import into a scratch catalogue.
    let t = Instant::now();
    let out = std::process::Command::new(crate::cli_util::BIN)
        .current_dir(d.path())
        .args([
            "--db",
            "scratch.db",
            "import",
            "big.csv",
            "--channel",
            "K",
            "--segments",
            "seg.txt",
        ])
        .output()
        .unwrap();
    assert!(out.status.success());
    let full = t.elapsed().as_secs_f64();
    let mut seed = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .unwrap()
        .as_nanos() as u64
        | 1;
    eprintln!("kill test: full import {full:.3} s, seed {seed}");
    let mut killed = 0;
    let mut attempts = 0;
    while killed < N_KILLS {
        assert!(
            attempts < 3 * N_KILLS,
            "kills keep missing: {killed} of {attempts}"
        );
        let i = attempts;
        attempts += 1;
        let ch = format!("Z1:K{i}");
        let mut child = d
            .cmd(&[
                "import",
                "big.csv",
                "--channel",
                &ch,
                "--segments",
                "seg.txt",
                "--quiet",
            ])
            .spawn()
            .unwrap();
        let wait = full * (0.02 + 0.93 * next(&mut seed));
        std::thread::sleep(Duration::from_secs_f64(wait));
        if child.try_wait().unwrap().is_none() {
            child.kill().unwrap(); // SIGKILL on Unix
            killed += 1;
        }
        child.wait().unwrap();
        if d.db().exists() {
            assert_consistent(&d);
        }
    }
    eprintln!("kill test: {killed} of {attempts} imports killed before they finished");
    // Re-run everything: finished imports are skipped, the rest complete.
    for i in 0..attempts {
        let ch = format!("Z1:K{i}");
        d.ok(&[
            "import",
            "big.csv",
            "--channel",
            &ch,
            "--segments",
            "seg.txt",
            "--quiet",
        ]);
    }
    assert_eq!(
        assert_consistent(&d),
        attempts as i64,
        "one import per channel"
    );
    let conn = rusqlite::Connection::open(d.db()).unwrap();
    let n: i64 = conn
        .query_row("SELECT COUNT(*) FROM triggers", [], |r| r.get(0))
        .unwrap();
    assert_eq!(n, (attempts * N_ROWS) as i64, "no duplicates");
}
