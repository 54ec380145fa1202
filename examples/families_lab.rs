//! Development aid: write the second scenario (seeds 1–3) and the demo,
//! scan their target channels, compute fingerprints and dump them with the
//! truth to CSV for study. `cargo run --release --example families_lab -- DIR`.
//! `... -- DIR eval` instead clusters copies of those catalogues (scan and
//! fingerprints reused) and prints the family scores; settings from the
//! environment, product defaults unless set: `CRIT` (`bic`/`icl`), `MORPH`
//! (0: peak frequency and Q only), `OVERLAP` (component grouping), `SEED`,
//! `NINIT` (seeded initialisations per fit), `STARTS` (seeded starts whose
//! medoid partition is kept).
//! `REFINE=0` (prep, eval, stability): peaks on the tiling grid, in
//! `lab.db`; the default (`REFINE=1`, as the product) refines them, in
//! `lab_refine.db`.
//! `... -- DIR stability` clusters each scenario seed with clustering
//! seeds 0..`SEEDS` (default 6; other settings as for `eval`) and prints
//! the ARI against the truth of each.
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

/// The scanned catalogue of a scenario directory: `lab_refine.db` (peaks
/// refined off the grid, the default), or `lab.db` with `REFINE=0`.
fn lab_db() -> &'static str {
    if env_or("REFINE", 1) == 1 {
        "lab_refine.db"
    } else {
        "lab.db"
    }
}

fn scan_target(dir: &Path, db: &Path, target: &str, segments: &Path) -> Result<()> {
    if db.exists() {
        return Ok(());
    }
    let (seg, _) = read_segments_file(segments)?;
    let bundle = Bundle::open(dir)?;
    let spec = bundle.channels.iter().find(|c| c.name == target).unwrap();
    let p = ScanParams {
        refine_peaks: env_or("REFINE", 1) == 1,
        ..ScanParams::default()
    };
    let scan = scan_channel(spec, &p, Some(&seg), &|_| {})?;
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

fn env_or<T: std::str::FromStr>(k: &str, d: T) -> T {
    std::env::var(k)
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(d)
}

/// A scratch copy `db` of `dir`'s scanned catalogue (fingerprints kept),
/// opened, with its map source.
fn scratch_copy(dir: &Path, db: &Path) -> Result<(rusqlite::Connection, BundleMaps)> {
    let _ = std::fs::remove_file(db);
    std::fs::copy(dir.join(lab_db()), db)?;
    let conn = catalogue::open(db)?;
    let src = BundleMaps::from_catalogue(&conn)?;
    Ok((conn, src))
}

/// The second scenario's score of the catalogue.
fn score(
    conn: &rusqlite::Connection,
    dir: &Path,
) -> Result<glitchbook::scenario::score::ScenarioScore> {
    glitchbook::scenario::score::score_catalogue(conn, dir, None, None, &Default::default())
}

/// Product clustering settings, overridden from the environment.
fn lab_params() -> glitchbook::families::ClusterParams {
    use glitchbook::families::{gmm::Criterion, ClusterParams};
    let d = ClusterParams::default();
    ClusterParams {
        seed: env_or("SEED", d.seed),
        criterion: match std::env::var("CRIT").as_deref() {
            Ok("icl") => Criterion::Icl,
            Ok("bic") => Criterion::Bic,
            _ => d.criterion,
        },
        morphology: env_or("MORPH", 1) == 1,
        merge_overlap: env_or("OVERLAP", d.merge_overlap),
        n_init: env_or("NINIT", d.n_init),
        starts: env_or("STARTS", d.starts),
        ..d
    }
}

fn eval(base: &Path) -> Result<()> {
    use glitchbook::families;
    let p = lab_params();
    for seed in [1u64, 2, 3] {
        let dir = base.join(format!("qm4_s{seed}"));
        let db = base.join(format!("eval_s{seed}.db"));
        let (mut conn, src) = scratch_copy(&dir, &db)?;
        let t = std::time::Instant::now();
        let rep = families::cluster_catalogue(&mut conn, &p, &src)?;
        let secs = t.elapsed().as_secs_f64();
        let sc = score(&conn, &dir)?;
        let f = sc.families.clone().expect("families");
        println!(
            "qm4 seed {seed}: {} families (k tried {:?}); all: ARI {:.3} hom {:.3} compl {:.3}; in family: ARI {:.3} compl {:.3}; answered {:.3}; quiet placed {} / quiet {} ({secs:.1} s)",
            rep.families.len(),
            rep.bic.len(),
            f.ari_all,
            f.hcv_all.homogeneity,
            f.hcv_all.completeness,
            f.ari_in_family,
            f.hcv_in_family.completeness,
            f.answered_fraction,
            rep.n_quiet_placed,
            rep.n_quiet
        );
        if std::env::var("VERBOSE").is_ok() {
            print!("{}", sc.render());
        }
        // Features stay for the next evaluation.
        let _ = std::fs::copy(&db, dir.join(lab_db()));
    }
    let dir = base.join("demo_s1");
    let db = base.join("eval_demo.db");
    let (mut conn, src) = scratch_copy(&dir, &db)?;
    let rep = families::cluster_catalogue(&mut conn, &p, &src)?;
    let truth = glitchbook::demo::read_truth(&dir.join("truth.csv"))?;
    let s = glitchbook::pipeline::score_families(&conn, &truth)?;
    println!(
        "demo seed 1: {} families, ARI {:.3} over {} matched",
        rep.families.len(),
        s.ari,
        s.n_matched
    );
    Ok(())
}

/// Cluster each scenario seed with clustering seeds 0..`STARTS` (default 6)
/// and pick the partition that agrees most with the others (largest summed
/// ARI between partitions, a medoid): is the most central partition a good
/// one when single seeds are not?
fn stability(base: &Path) -> Result<()> {
    use glitchbook::families::{self, ClusterParams};
    let seeds: u64 = env_or("SEEDS", 6);
    let p = lab_params();
    for seed in [1u64, 2, 3] {
        let dir = base.join(format!("qm4_s{seed}"));
        let mut truth_ari = Vec::new();
        let t = std::time::Instant::now();
        for cs in 0..seeds {
            let db = base.join(format!("stab_s{seed}.db"));
            let (mut conn, src) = scratch_copy(&dir, &db)?;
            let rep =
                families::cluster_catalogue(&mut conn, &ClusterParams { seed: cs, ..p }, &src)?;
            let kept = rep
                .starts
                .iter()
                .find(|s| s.chosen)
                .map_or(1.0, |s| s.agreement);
            let ari = score(&conn, &dir)?.families.expect("families").ari_all;
            truth_ari.push(format!("{ari:.3} (agreement {kept:.2})"));
        }
        println!(
            "qm4 seed {seed}, {} starts: ARI by clustering seed [{}] ({:.1} s per run)",
            p.starts,
            truth_ari.join(", "),
            t.elapsed().as_secs_f64() / seeds as f64
        );
    }
    Ok(())
}

fn main() -> Result<()> {
    let base = std::path::PathBuf::from(std::env::args().nth(1).unwrap_or("/tmp/lab".into()));
    if std::env::args().nth(2).as_deref() == Some("eval") {
        return eval(&base);
    }
    if std::env::args().nth(2).as_deref() == Some("stability") {
        return stability(&base);
    }
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
        let db = dir.join(lab_db());
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
    let db = dir.join(lab_db());
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
