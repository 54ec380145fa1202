//! Catalogue throughput (prints figures; harness = false).
//!
//! 1. Insert rate: one scan of N_INSERT triggers (default 1,000,000) in one
//!    transaction through `catalogue::insert_scan`. Target ≥ 300,000 /s.
//! 2. Query latency: a catalogue of N_BIG triggers (default 10,000,000;
//!    10 channels) answers a one-hour `--channel X --since T --until T`
//!    query; timed through the library and through the real binary
//!    (process start + open + query + CSV to /dev/null). Target < 100 ms.
//!
//! Usage: `[BENCH_DIR=/dev/shm] cargo bench --bench catalogue -- [N_INSERT] [N_BIG]`
//! (or `cargo test --release --bench catalogue -- ...`).
use glitchbook::catalogue::{self, InsertOutcome, ScanKind, ScanRecord, TriggerQuery};
use glitchbook::io::Role;
use glitchbook::segments::SegmentList;
use glitchbook::trigger::{energy_from_snr, Trigger};
use std::time::Instant;

const T0: f64 = 1_400_000_000.0;
const STEP_S: f64 = 0.5;

fn triggers(n: usize, t0: f64) -> Vec<Trigger> {
    (0..n)
        .map(|i| {
            let t = t0 + STEP_S * i as f64 + 0.001 * (i % 97) as f64;
            let snr = 5.5 + (i * 7919 % 1000) as f64 / 100.0;
            let f = 20.0 + (i * 104_729 % 2000) as f64;
            Trigger {
                t_peak: t,
                t_start: t - 0.05,
                t_end: t + 0.05,
                f_peak: f,
                f_low: 0.8 * f,
                f_high: 1.25 * f,
                snr,
                snr_eq: snr,
                q: 4.0 + (i % 60) as f64,
                energy: energy_from_snr(snr),
            }
        })
        .collect()
}

/// CPU time (user + system) of this process \[s\], from /proc/self/stat
/// (Linux; clock ticks assumed 100 /s). NaN elsewhere.
fn cpu_s() -> f64 {
    let Ok(stat) = std::fs::read_to_string("/proc/self/stat") else {
        return f64::NAN;
    };
    // Fields after the parenthesised command name; utime, stime are 14, 15.
    let rest = &stat[stat.rfind(')').map_or(0, |i| i + 2)..];
    let f: Vec<&str> = rest.split_whitespace().collect();
    let tick = |i: usize| {
        f.get(i)
            .and_then(|x| x.parse::<f64>().ok())
            .unwrap_or(f64::NAN)
    };
    (tick(11) + tick(12)) / 100.0
}

fn insert(conn: &mut rusqlite::Connection, channel: &str, ts: &[Trigger]) -> f64 {
    let seg = SegmentList::single(ts[0].t_start, ts[ts.len() - 1].t_end);
    let checksum = format!("{channel}-{}", ts.len());
    let t = Instant::now();
    let tx = conn.transaction().unwrap();
    let out = catalogue::insert_scan(
        &tx,
        &ScanRecord {
            channel,
            role: Role::Target,
            rate_hz: Some(4096.0),
            kind: ScanKind::Scan,
            source_path: "bench",
            input_checksum: &checksum,
            params_json: "{}",
            analysed: &seg,
            triggers: ts,
        },
    )
    .unwrap();
    tx.commit().unwrap();
    assert!(matches!(out, InsertOutcome::Inserted { .. }));
    t.elapsed().as_secs_f64()
}

fn main() {
    let nums: Vec<usize> = std::env::args()
        .skip(1)
        .filter_map(|a| a.replace('_', "").parse().ok())
        .collect();
    let n_insert = nums.first().copied().unwrap_or(1_000_000);
    let n_big = nums.get(1).copied().unwrap_or(10_000_000);
    // BENCH_DIR (e.g. /dev/shm) places the catalogues elsewhere, to tell
    // disk time from CPU time.
    let dir = match std::env::var_os("BENCH_DIR") {
        Some(d) => tempfile::tempdir_in(d).unwrap(),
        None => tempfile::tempdir().unwrap(),
    };

    // 1. Insert rate.
    let ts = triggers(n_insert, T0);
    let mut conn = catalogue::open(&dir.path().join("insert.db")).unwrap();
    let cpu0 = cpu_s();
    let secs = insert(&mut conn, "Z1:INSERT", &ts);
    let cpu = cpu_s() - cpu0;
    println!(
        "insert: {n_insert} triggers in {secs:.3} s wall = {:.0} triggers/s; {cpu:.2} s CPU = {:.0} triggers/CPU-s (target >= 300000 /s)",
        n_insert as f64 / secs,
        n_insert as f64 / cpu
    );
    if let Ok(l) = std::fs::read_to_string("/proc/loadavg") {
        println!("load average during the run: {}", l.trim());
    }
    drop(conn);

    // 2. Query latency on a big catalogue.
    let n_channels = 10;
    let per = n_big / n_channels;
    let db = dir.path().join("big.db");
    let mut conn = catalogue::open(&db).unwrap();
    let t = Instant::now();
    for c in 0..n_channels {
        let ts = triggers(per, T0);
        insert(&mut conn, &format!("Z1:CH{c}"), &ts);
    }
    println!(
        "built {} triggers ({n_channels} channels) in {:.1} s; file {:.0} MB",
        per * n_channels,
        t.elapsed().as_secs_f64(),
        std::fs::metadata(&db).unwrap().len() as f64 / 1e6
    );
    let since = T0 + 0.5 * STEP_S * per as f64;
    let until = since + 3600.0;
    let q = TriggerQuery {
        channel: Some("Z1:CH7".into()),
        since: Some(since),
        until: Some(until),
        ..Default::default()
    };
    drop(conn);
    let mut best = f64::INFINITY;
    let mut n_rows = 0;
    for _ in 0..5 {
        let t = Instant::now();
        let conn = catalogue::open(&db).unwrap();
        n_rows = catalogue::query_triggers(&conn, &q).unwrap().len();
        best = best.min(t.elapsed().as_secs_f64());
    }
    println!(
        "query (library, open + 1 h window of one channel): {n_rows} rows in {:.1} ms (best of 5; target < 100 ms)",
        best * 1e3
    );
    let mut best_bin = f64::INFINITY;
    for _ in 0..5 {
        let t = Instant::now();
        let out = std::process::Command::new(env!("CARGO_BIN_EXE_glitchbook"))
            .arg("--db")
            .arg(&db)
            .args(["triggers", "--channel", "Z1:CH7", "--format", "csv"])
            .arg("--since")
            .arg(since.to_string())
            .arg("--until")
            .arg(until.to_string())
            .stdout(std::process::Stdio::null())
            .status()
            .unwrap();
        assert!(out.success());
        best_bin = best_bin.min(t.elapsed().as_secs_f64());
    }
    println!(
        "query (binary `triggers --channel --since --until --format csv` > /dev/null): {:.1} ms (best of 5; target < 100 ms)",
        best_bin * 1e3
    );
}
