//! Development aid: write the second scenario (seeds 1–3) and the demo,
//! scan their target channels, compute fingerprints and dump them with the
//! truth to CSV for study. `cargo run --release --example families_lab -- DIR`
use anyhow::Result;
use glitchbook::catalogue::{self, TriggerQuery};
use glitchbook::families::features::{fingerprint, SCALAR_NAMES};
use glitchbook::io::{read_segments_file, Bundle};
use glitchbook::maps::BundleMaps;
use glitchbook::scan::{scan_channel, ScanParams};
use glitchbook::scenario::score::{match_triggers, MatchParams};
use rayon::prelude::*;
use std::io::Write;
use std::path::Path;

fn scan_target(dir: &Path, db: &Path, target: &str, segments: &Path) -> Result<()> {
    if db.exists() {
        return Ok(());
    }
    let (seg, _) = read_segments_file(segments)?;
    let bundle = Bundle::open(dir)?;
    let spec = bundle.channels.iter().find(|c| c.name == target).unwrap();
    let scan = scan_channel(spec, &ScanParams::default(), Some(&seg), &|_| {})?;
    let mut conn = catalogue::open(db)?;
    let tx = conn.transaction()?;
    catalogue::insert_channel_scan(&tx, &scan, &std::fs::canonicalize(dir)?)?;
    tx.commit()?;
    Ok(())
}

fn dump(db: &Path, target: &str, labels: &[Option<String>], out: &Path) -> Result<()> {
    let conn = catalogue::open(db)?;
    let trig = catalogue::query_triggers(
        &conn,
        &TriggerQuery {
            channel: Some(target.into()),
            ..Default::default()
        },
    )?;
    let src = BundleMaps::from_catalogue(&conn)?;
    let t = std::time::Instant::now();
    let fps: Vec<_> = trig
        .par_iter()
        .map(|r| fingerprint(&r.to_trigger(), &r.channel, &src))
        .collect();
    eprintln!(
        "{}: {} fingerprints in {:.2} s",
        db.display(),
        trig.len(),
        t.elapsed().as_secs_f64()
    );
    let mut f = std::io::BufWriter::new(std::fs::File::create(out)?);
    write!(f, "id,t_peak,snr,truth")?;
    for n in SCALAR_NAMES {
        write!(f, ",{n}")?;
    }
    writeln!(f)?;
    for ((r, fp), lab) in trig.iter().zip(&fps).zip(labels) {
        let Ok(fp) = fp else { continue };
        write!(
            f,
            "{},{:.4},{:.3},{}",
            r.id,
            r.t_peak,
            r.snr,
            lab.clone().unwrap_or_default()
        )?;
        for v in &fp.scalars {
            write!(f, ",{v}")?;
        }
        writeln!(f)?;
    }
    Ok(())
}

fn main() -> Result<()> {
    let base = std::path::PathBuf::from(std::env::args().nth(1).unwrap_or("/tmp/lab".into()));
    std::fs::create_dir_all(&base)?;
    for seed in [1u64, 2, 3] {
        let dir = base.join(format!("qm4_s{seed}"));
        if !dir.join("truth.csv").exists() {
            glitchbook::scenario::write_scenario(
                &dir,
                &glitchbook::scenario::ScenarioOptions {
                    seed,
                    ..Default::default()
                },
            )?;
        }
        let target = glitchbook::scenario::model::TARGET_CHANNEL;
        let db = dir.join("lab.db");
        scan_target(&dir, &db, target, &dir.join("segments.txt"))?;
        let truth = glitchbook::scenario::truth::read_truth(&dir.join("truth.csv"))?;
        let conn = catalogue::open(&db)?;
        let trig = catalogue::query_triggers(
            &conn,
            &TriggerQuery {
                channel: Some(target.into()),
                ..Default::default()
            },
        )?;
        let m = match_triggers(&truth, &trig, &MatchParams::default());
        let labels: Vec<Option<String>> = m
            .per_trigger
            .iter()
            .map(|k| k.map(|k| truth[k].mechanism.clone()))
            .collect();
        drop(conn);
        dump(&db, target, &labels, &base.join(format!("qm4_s{seed}.csv")))?;
    }
    // The demo.
    let dir = base.join("demo_s1");
    if !dir.join("truth.csv").exists() {
        glitchbook::demo::write_scenario(
            &dir,
            &glitchbook::demo::DemoOptions {
                seed: 1,
                hours: 2.0,
            },
        )?;
    }
    let target = glitchbook::demo::TARGET_CHANNEL;
    let db = dir.join("lab.db");
    scan_target(&dir, &db, target, &dir.join("segments.txt"))?;
    let truth = glitchbook::demo::read_truth(&dir.join("truth.csv"))?;
    let conn = catalogue::open(&db)?;
    let trig = catalogue::query_triggers(
        &conn,
        &TriggerQuery {
            channel: Some(target.into()),
            ..Default::default()
        },
    )?;
    let labels: Vec<Option<String>> = trig
        .iter()
        .map(|t| {
            truth
                .iter()
                .find(|g| (g.t_peak_gps - t.t_peak).abs() <= 0.1)
                .map(|g| g.family.clone())
        })
        .collect();
    drop(conn);
    dump(&db, target, &labels, &base.join("demo_s1.csv"))?;
    Ok(())
}
