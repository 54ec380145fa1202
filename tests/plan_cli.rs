//! Scale-out through the real binary on the demo bundle: `plan` →
//! `run-plan --jobs 2` → `merge` must give the same catalogue content as one
//! `scan` of the same bundle. Reference: the single-machine scan (same
//! trigger count per channel, same peak times to the sample, same SNR, same
//! analysed time); also `plan status` / `run-plan` / `merge` on a failed
//! shard, and `compare-catalogues` catching a missing trigger.
use crate::cli_util::Dir;
use glitchbook::catalogue::{channels, open_existing, query_triggers, TriggerQuery, TriggerRow};
use std::collections::BTreeMap;
use std::path::Path;

/// Triggers per channel, by peak time.
fn triggers_by_channel(db: &Path) -> BTreeMap<String, Vec<TriggerRow>> {
    let conn = open_existing(db).unwrap();
    let all = query_triggers(&conn, &TriggerQuery::default()).unwrap();
    let mut out: BTreeMap<String, Vec<TriggerRow>> = BTreeMap::new();
    for t in all {
        out.entry(t.channel.clone()).or_default().push(t);
    }
    out
}

fn code(out: &std::process::Output) -> i32 {
    out.status.code().unwrap_or(-1)
}

fn text(out: &std::process::Output) -> String {
    format!(
        "{}{}",
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    )
}

#[test]
fn plan_run_plan_merge_equals_one_go_scan_on_demo() {
    let d = Dir::new();
    let p = |s: &str| d.path().join(s).display().to_string();
    d.ok(&[
        "demo-data",
        "--out",
        &p("demo"),
        "--hours",
        "0.1",
        "--seed",
        "3",
    ]);
    let segs = p("demo/segments.txt");
    d.ok(&[
        "plan",
        &p("demo"),
        "--out",
        &p("work"),
        "--shards",
        "4",
        "--segments",
        &segs,
        "--cpus",
        "1",
    ]);
    let script = std::fs::read_to_string(d.path().join("work/run-array.sh")).unwrap();
    assert!(script.contains("#SBATCH --array=0-3\n"), "{script}");
    assert!(script.contains("#SBATCH --cpus-per-task=1\n"), "{script}");
    // The shard command line comes from the CLI (cli/common.rs::shard_command).
    assert!(
        script.contains(r#""$EXE" --db "$DIR/shards/shard-$K.db" scan --shard "$K" --plan "$DIR""#),
        "{script}"
    );
    // A second plan into the same directory is refused (exit 2, one line).
    let again = d.run(&["plan", &p("demo"), "--out", &p("work")]);
    assert_eq!(code(&again), 2, "{}", text(&again));
    assert!(
        text(&again).contains("already holds a plan"),
        "{}",
        text(&again)
    );
    // Before running: all missing, exit 0.
    let st = d.run(&["plan", "status", &p("work")]);
    assert_eq!(code(&st), 0, "{}", text(&st));
    assert!(text(&st).contains("4 shards: 0 done, 0 failed, 4 missing"));

    let out = d.ok(&["run-plan", &p("work"), "--jobs", "2"]);
    assert!(
        out.contains("4 shards: 4 done, 0 failed, 0 missing"),
        "{out}"
    );
    let merged = d.path().join("merged.db");
    let m = d.ok(&["merge", &p("work"), "--into", &merged.display().to_string()]);
    assert!(m.contains("merged 4 shards"), "{m}");
    // Merging twice changes nothing.
    let sum = crate::cli_util::checksum(&merged);
    let m2 = d.ok(&["merge", &p("work"), "--into", &merged.display().to_string()]);
    assert!(
        m2.contains("merged 0 shards") && m2.contains("4 already merged"),
        "{m2}"
    );
    assert_eq!(crate::cli_util::checksum(&merged), sum);
    // --into defaults to the global --db (c.db).
    d.ok(&["merge", &p("work")]);
    let count = |db: &Path| {
        triggers_by_channel(db)
            .values()
            .map(Vec::len)
            .sum::<usize>()
    };
    assert_eq!(count(&d.db()), count(&merged));

    // The one-go scan of the same bundle and segments.
    let one = d.path().join("one.db");
    let out = std::process::Command::new(crate::cli_util::BIN)
        .arg("--db")
        .arg(&one)
        .args(["scan", &p("demo"), "--segments", &segs])
        .output()
        .unwrap();
    assert!(out.status.success(), "{}", text(&out));

    // Reference: the one-go scan. Same channels, same trigger count, peaks
    // within one sample, same SNR, f_peak, Q, and the same analysed time.
    let a = triggers_by_channel(&one);
    let b = triggers_by_channel(&merged);
    assert_eq!(a.keys().collect::<Vec<_>>(), b.keys().collect::<Vec<_>>());
    assert!(
        a["AV1:STRAIN"].len() >= 5,
        "demo strain has too few triggers to compare: {}",
        a["AV1:STRAIN"].len()
    );
    let (ca, cb) = (
        open_existing(&one).unwrap(),
        open_existing(&merged).unwrap(),
    );
    let rates: BTreeMap<String, f64> = channels(&ca)
        .unwrap()
        .into_iter()
        .map(|c| (c.name, c.rate_hz.unwrap()))
        .collect();
    for (name, ta) in &a {
        let tb = &b[name];
        assert_eq!(ta.len(), tb.len(), "{name}: trigger count");
        for (x, y) in ta.iter().zip(tb) {
            assert!(
                (x.t_peak - y.t_peak).abs() <= 1.0 / rates[name],
                "{name}: t_peak {} vs {}",
                x.t_peak,
                y.t_peak
            );
            assert!((x.snr - y.snr).abs() <= 1e-9 * x.snr, "{name}: snr");
            assert_eq!((x.f_peak, x.q), (y.f_peak, y.q), "{name}: f_peak, q");
        }
        let (sa, sb) = (
            glitchbook::catalogue::analysed_segments(&ca, name).unwrap(),
            glitchbook::catalogue::analysed_segments(&cb, name).unwrap(),
        );
        assert_eq!(sa, sb, "{name}: analysed segments");
    }
    // Shard scans record the bundle directory (absolute), as `scan` does.
    let src = |c: &rusqlite::Connection| -> Vec<String> {
        c.prepare("SELECT DISTINCT source_path FROM scans")
            .unwrap()
            .query_map([], |r| r.get(0))
            .unwrap()
            .map(Result::unwrap)
            .collect()
    };
    let demo_abs = std::fs::canonicalize(d.path().join("demo")).unwrap();
    assert_eq!(src(&cb), vec![demo_abs.display().to_string()]);
    assert_eq!(src(&ca), src(&cb));

    // The comparison command agrees, and catches one missing trigger.
    let c = d.ok(&[
        "compare-catalogues",
        &one.display().to_string(),
        &merged.display().to_string(),
    ]);
    assert!(c.contains("all 8 channels agree"), "{c}");
    let broken = d.path().join("broken.db");
    std::fs::copy(&merged, &broken).unwrap();
    open_existing(&broken)
        .unwrap()
        .execute(
            "DELETE FROM triggers WHERE id = (SELECT MAX(t.id) FROM triggers t \
             JOIN channels c ON c.id = t.channel_id WHERE c.name = 'AV1:STRAIN')",
            [],
        )
        .unwrap();
    let c = d.run(&[
        "compare-catalogues",
        &one.display().to_string(),
        &broken.display().to_string(),
    ]);
    assert_eq!(code(&c), 1, "{}", text(&c));
    assert!(text(&c).contains("AV1:STRAIN: DIFFERENT"), "{}", text(&c));

    // A shard whose input changed after planning fails: run-plan and
    // plan status exit 1 naming the shard and its log; merge exits 1
    // (shard missing) after merging the others.
    std::fs::remove_file(d.path().join("work/shards/shard-1.db")).unwrap();
    let npy = d.path().join("demo/AV1-STRAIN.npy");
    let f = std::fs::File::options().write(true).open(&npy).unwrap();
    f.set_modified(std::time::SystemTime::UNIX_EPOCH + std::time::Duration::from_secs(1_000_000))
        .unwrap();
    drop(f);
    let r = d.run(&["run-plan", &p("work"), "--jobs", "2"]);
    assert_eq!(code(&r), 1, "{}", text(&r));
    assert!(
        text(&r).contains("shard 1: failed") && text(&r).contains("shard-1.log"),
        "{}",
        text(&r)
    );
    let st = d.run(&["plan", "status", &p("work")]);
    assert_eq!(code(&st), 1, "{}", text(&st));
    assert!(text(&st).contains("3 done, 1 failed"), "{}", text(&st));
    let log = std::fs::read_to_string(d.path().join("work/logs/shard-1.log")).unwrap();
    assert!(log.contains("file changed since the plan"), "{log}");
    let m = d.run(&["merge", &p("work"), "--into", &p("partial.db")]);
    assert_eq!(code(&m), 1, "{}", text(&m));
    assert!(text(&m).contains("merged 3 shards"), "{}", text(&m));
}
