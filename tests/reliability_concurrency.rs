//! Two writer processes on different inputs into one (initially absent)
//! catalogue plus a reader looping `triggers`/`channels`: every process
//! succeeds, and nothing is lost or duplicated.
use crate::cli_util::{count, trigger_csv, Dir};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;

const N_PER_FILE: usize = 20_000;
const FILES_PER_WRITER: usize = 3;

#[test]
fn two_writers_and_a_reader() {
    let d = Arc::new(Dir::new());
    for w in 0..2 {
        for k in 0..FILES_PER_WRITER {
            let t0 = 1_400_000_000.0 + 1e6 * (w * FILES_PER_WRITER + k) as f64;
            d.write(&format!("w{w}_{k}.csv"), &trigger_csv(N_PER_FILE, t0));
        }
    }
    let done = Arc::new(AtomicBool::new(false));
    let writers: Vec<_> = (0..2)
        .map(|w| {
            let d = Arc::clone(&d);
            std::thread::spawn(move || {
                for k in 0..FILES_PER_WRITER {
                    let f = format!("w{w}_{k}.csv");
                    let ch = format!("Z1:W{w}-{k}");
                    d.ok(&["import", &f, "--channel", &ch, "--quiet"]);
                }
            })
        })
        .collect();
    let reader = {
        let d = Arc::clone(&d);
        let done = Arc::clone(&done);
        std::thread::spawn(move || {
            let mut reads = 0;
            while !done.load(Ordering::SeqCst) {
                if !d.db().exists() {
                    std::thread::sleep(std::time::Duration::from_millis(5));
                    continue;
                }
                let t = d.run(&["triggers", "--format", "csv", "--limit", "100"]);
                let c = d.run(&["channels", "--format", "json"]);
                for out in [&t, &c] {
                    assert!(
                        out.status.success(),
                        "reader failed: {}",
                        String::from_utf8_lossy(&out.stderr)
                    );
                }
                // A reader sees whole imports only: channels list counts
                // that are multiples of a full file.
                let v: serde_json::Value = serde_json::from_slice(&c.stdout).unwrap();
                for ch in v.as_array().unwrap() {
                    assert_eq!(ch["n_triggers"].as_i64(), Some(N_PER_FILE as i64));
                }
                reads += 1;
            }
            reads
        })
    };
    for w in writers {
        w.join().unwrap();
    }
    done.store(true, Ordering::SeqCst);
    let reads = reader.join().unwrap();
    assert!(reads > 0);
    let total = (2 * FILES_PER_WRITER * N_PER_FILE) as i64;
    assert_eq!(
        count(&d.db(), "triggers"),
        total,
        "nothing lost or duplicated"
    );
    assert_eq!(count(&d.db(), "scans"), (2 * FILES_PER_WRITER) as i64);
    let conn = rusqlite::Connection::open(d.db()).unwrap();
    let distinct: i64 = conn
        .query_row(
            "SELECT COUNT(*) FROM (SELECT DISTINCT channel_id, t_peak_ns FROM triggers)",
            [],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(distinct, total);
    assert!(!d.ok(&["check"]).contains("FAILED"));
}

/// Two `scan` processes on different demo bundles (their channels renamed
/// apart) into one catalogue, plus a reader looping `families`: all succeed,
/// and the catalogue holds exactly the triggers of the two scans run alone.
#[test]
fn two_scans_and_a_families_reader() {
    let d = Arc::new(Dir::new());
    let mut bundles = Vec::new();
    for (seed, prefix) in [(1, "AV1:"), (2, "BW2:")] {
        let dir = d.path().join(format!("demo{seed}"));
        d.ok(&[
            "--quiet",
            "demo-data",
            "--out",
            dir.to_str().unwrap(),
            "--hours",
            "0.05",
            "--seed",
            &seed.to_string(),
        ]);
        // Rename the channels so the two bundles are different instruments.
        let toml = dir.join("bundle.toml");
        let text = std::fs::read_to_string(&toml)
            .unwrap()
            .replace("AV1:", prefix);
        std::fs::write(&toml, text).unwrap();
        bundles.push(dir.to_str().unwrap().to_string());
    }
    // Reference counts: each bundle scanned alone.
    let mut expected = 0;
    for b in &bundles {
        let r = Dir::new();
        r.ok(&["--quiet", "scan", b]);
        expected += count(&r.db(), "triggers");
    }
    let done = Arc::new(AtomicBool::new(false));
    let reader = {
        let d = Arc::clone(&d);
        let done = Arc::clone(&done);
        std::thread::spawn(move || {
            let mut reads = 0;
            while !done.load(Ordering::SeqCst) {
                if !d.db().exists() {
                    std::thread::sleep(std::time::Duration::from_millis(5));
                    continue;
                }
                let out = d.run(&["families", "--format", "json"]);
                assert!(
                    out.status.success(),
                    "reader failed: {}",
                    String::from_utf8_lossy(&out.stderr)
                );
                reads += 1;
            }
            reads
        })
    };
    let writers: Vec<_> = bundles
        .iter()
        .map(|b| {
            let d = Arc::clone(&d);
            let b = b.clone();
            std::thread::spawn(move || d.ok(&["--quiet", "scan", &b]))
        })
        .collect();
    for w in writers {
        w.join().unwrap();
    }
    done.store(true, Ordering::SeqCst);
    let reads = reader.join().unwrap();
    assert!(reads > 0);
    assert_eq!(
        count(&d.db(), "triggers"),
        expected,
        "lost or duplicated triggers"
    );
    assert_eq!(
        count(&d.db(), "scans"),
        16,
        "8 channels in each bundle, scanned once"
    );
}
