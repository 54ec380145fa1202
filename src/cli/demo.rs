//! `glitchbook demo`: write the invented observatory scenario and run the
//! whole loop on it: scan, families, witnesses, vetoes, rates, report.
//! Prints what it did, the checks against the scenario's ground truth, and
//! where the files are.
use super::Global;
use anyhow::{bail, Context, Result};
use glitchbook::catalogue::{self, InsertOutcome};
use glitchbook::coupling::{self, VetoParams, WitnessParams};
use glitchbook::demo::{self, DemoOptions, TruthGlitch};
use glitchbook::families::{self, metrics::adjusted_rand_index, ClusterParams};
use glitchbook::io::{read_injections, read_segments_file, Bundle};
use glitchbook::maps::BundleMaps;
use glitchbook::rates::{self, RateParams};
use glitchbook::report::{self, ReportParams};
use glitchbook::scan::{scan_channel, ScanParams};
use rusqlite::Connection;
use std::collections::HashMap;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::ExitCode;
use std::time::Instant;

/// Write the demo scenario and run the whole pipeline on it.
#[derive(Debug, clap::Args)]
pub struct DemoArgs {
    /// Directory for the scenario, catalogue, veto segments and report.
    #[arg(long, default_value = "glitchbook-demo", value_name = "DIR")]
    pub out: PathBuf,
    /// Seed of the scenario and of the clustering.
    #[arg(long, default_value_t = 1)]
    pub seed: u64,
    /// Length of the scenario [hours] (0.05 to 4).
    #[arg(long, default_value_t = 2.0)]
    pub hours: f64,
}

/// Run the command. The catalogue is `DIR/glitchbook.db` unless `--db` names
/// another file; a demo catalogue inside DIR is made afresh each time.
pub fn run(g: &Global, a: DemoArgs) -> Result<ExitCode> {
    let t_all = Instant::now();
    let db = if g.db == Path::new("glitchbook.db") {
        a.out.join("glitchbook.db")
    } else {
        g.db.clone()
    };
    std::fs::create_dir_all(&a.out).with_context(|| format!("creating {}", a.out.display()))?;
    if db.starts_with(&a.out) {
        for suffix in ["", "-wal", "-shm"] {
            let p = PathBuf::from(format!("{}{suffix}", db.display()));
            if p.exists() {
                std::fs::remove_file(&p).with_context(|| format!("removing {}", p.display()))?;
            }
        }
    }
    // Progress lines; a reader that went away (`| head`) does not stop the demo.
    let say = |m: String| {
        let _ = writeln!(std::io::stdout(), "{m}");
    };

    // 1. Scenario.
    let t = Instant::now();
    let sc = demo::write_scenario(
        &a.out,
        &DemoOptions {
            seed: a.seed,
            hours: a.hours,
        },
    )?;
    say(format!(
        "1. scenario: {:.1} h of the invented Ashgrove Valley observatory, {} channels, written to {} ({:.1} s)",
        (sc.end_gps - sc.start_gps) / 3600.0,
        sc.channels.len(),
        sc.dir.display(),
        t.elapsed().as_secs_f64()
    ));

    // 2. Scan every channel inside the analysis segments.
    let t = Instant::now();
    let bundle = Bundle::open(&a.out)?;
    let (segments, warnings) = read_segments_file(&sc.segments_txt)?;
    for w in warnings {
        super::warn(&w);
    }
    let bundle_dir = std::fs::canonicalize(&a.out)?;
    let params = ScanParams::default();
    let scans = bundle
        .channels
        .iter()
        .map(|spec| scan_channel(spec, &params, Some(&segments), &|_| {}))
        .collect::<Result<Vec<_>>>()?;
    let mut conn = catalogue::open(&db)?;
    let tx = conn.transaction_with_behavior(rusqlite::TransactionBehavior::Immediate)?;
    let mut n_trig = 0;
    for s in &scans {
        if let InsertOutcome::Inserted { n_triggers, .. } =
            catalogue::insert_channel_scan(&tx, s, &bundle_dir)?
        {
            n_trig += n_triggers;
        }
    }
    tx.commit()?;
    say(format!(
        "2. scan: {n_trig} triggers in {} channels ({:.1} s)",
        scans.len(),
        t.elapsed().as_secs_f64()
    ));
    let target = scans
        .iter()
        .find(|s| s.channel.name == demo::TARGET_CHANNEL)
        .context("the demo bundle has no target channel")?;
    let truth = demo::read_truth(&sc.truth_csv)?;
    let (found, eligible) = recall(&truth, target, 8.0);
    say(format!(
        "   recall of injected target glitches with SNR >= 8 inside analysed time: {found}/{eligible} = {:.1}%",
        100.0 * found as f64 / eligible.max(1) as f64
    ));

    // 3. Families.
    let t = Instant::now();
    let src = BundleMaps::from_catalogue(&conn)?;
    let cp = ClusterParams {
        seed: a.seed,
        ..ClusterParams::default()
    };
    let rep = families::cluster_catalogue(&mut conn, &cp, &src)?;
    say(format!(
        "3. families: {} triggers with SNR >= {} sorted into {} families ({:.1} s)",
        rep.n_clustered,
        cp.min_snr,
        rep.families.len(),
        t.elapsed().as_secs_f64()
    ));
    let names = family_check(&conn, &truth, &say)?;
    // Name each family after the scenario families it holds most of, to
    // show labels; in real use people name families.
    for (fam, name) in &names {
        families::label(
            &mut conn,
            *fam,
            name,
            Some("named by the demo from its ground truth"),
            "demo",
        )?;
    }

    // 4. Witnesses and vetoes.
    let t = Instant::now();
    let wit = coupling::run_witnesses(&mut conn, &WitnessParams::default())?;
    let injections = read_injections(&sc.injections_csv)?;
    let vet = coupling::run_vetoes(&mut conn, &VetoParams::default(), Some(&injections))?;
    let veto_dir = a.out.join("vetoes");
    let files = coupling::write_veto_segments(&vet, &veto_dir)?;
    say(format!(
        "4. witnesses: {} rows; vetoes: {} rounds, {} channel proposals ({} with segment files in {}) ({:.1} s)",
        wit.rows.len(),
        vet.rounds.len(),
        vet.proposals.len(),
        files.len() / 2,
        veto_dir.display(),
        t.elapsed().as_secs_f64()
    ));
    for (fam, name) in &names {
        if let Some(best) = wit.best.iter().find(|r| r.family_id == Some(*fam)) {
            say(format!(
                "   family {fam} ({name}): best witness {} (aux SNR >= {}, window {} s, efficiency {:.2}, false alarm {:.1e}{})",
                best.aux_channel,
                glitchbook::output::fixed(best.aux_min_snr, 2),
                best.window_s,
                best.efficiency,
                best.false_alarm_any,
                if best.beyond_chance { "" } else { ", consistent with chance" }
            ));
        }
    }
    if let Some(l) = wit
        .lags
        .iter()
        .find(|l| l.family_id.is_some() && l.pairs > 0)
    {
        say(format!(
            "   lags are {}: e.g. {} median {:+.4} s",
            glitchbook::coupling::lag::LAG_DEFINITION,
            l.aux_channel,
            l.lag_median_s.unwrap_or(0.0)
        ));
    }
    say(format!("   {}", coupling::VETO_CAUTION));

    // 5. Rates and change points.
    let rr = rates::rates(
        &conn,
        &RateParams {
            bin_s: 600.0,
            ..RateParams::default()
        },
    )?;
    if let Some((fam, label)) = names
        .iter()
        .find(|(_, n)| n.split('+').any(|part| part == "moth"))
    {
        if let Some(series) = rr.series.iter().find(|s| s.family_id == Some(*fam)) {
            let nearest = series.change_times_gps.iter().min_by(|x, y| {
                (*x - sc.late_family_start_gps)
                    .abs()
                    .total_cmp(&(*y - sc.late_family_start_gps).abs())
            });
            match nearest {
                Some(c) => say(format!(
                    "5. rates: the family holding the late scenario family moth (family {fam}, {label}) has a change point {:+.0} s from moth's true start",
                    c - sc.late_family_start_gps
                )),
                None => say(format!("5. rates: no change point found for the late family {fam}")),
            }
        }
    }

    // 6. Report.
    let t = Instant::now();
    let report_dir = a.out.join("report");
    let thumbs = super::report::thumbnails(&conn, &report_dir)?;
    let data = report::gather(
        &conn,
        &ReportParams {
            catalogue: db.display().to_string(),
            ..ReportParams::default()
        },
    )?;
    let index = report::write_report(&data, &report_dir, &thumbs)?;
    say(format!(
        "6. report: {} ({:.1} s)",
        index.display(),
        t.elapsed().as_secs_f64()
    ));
    say(format!(
        "done in {:.1} s. Catalogue: {} (try: glitchbook --db {} families)",
        t_all.elapsed().as_secs_f64(),
        db.display(),
        db.display()
    ));
    Ok(ExitCode::SUCCESS)
}

/// Injected target glitches with SNR ≥ `min_snr` inside analysed time, and
/// how many have a trigger within 0.1 s.
fn recall(
    truth: &[TruthGlitch],
    scan: &glitchbook::scan::ChannelScan,
    min_snr: f64,
) -> (usize, usize) {
    let times: Vec<f64> = scan.triggers.iter().map(|t| t.t_peak).collect();
    let eligible: Vec<&TruthGlitch> = truth
        .iter()
        .filter(|g| g.snr_target >= min_snr && scan.analysed.contains(g.t_peak_gps))
        .collect();
    let found = eligible
        .iter()
        .filter(|g| {
            let i = times.partition_point(|&t| t < g.t_peak_gps - 0.1);
            times.get(i).is_some_and(|&t| t <= g.t_peak_gps + 0.1)
        })
        .count();
    (found, eligible.len())
}

/// Compare families with the scenario's ground truth over matched triggers:
/// adjusted Rand index and the share of each scenario family in its dominant
/// family. Returns (family id, scenario name) for each family's majority.
fn family_check(
    conn: &Connection,
    truth: &[TruthGlitch],
    say: &dyn Fn(String),
) -> Result<Vec<(i64, String)>> {
    let mut st = conn.prepare(
        "SELECT t.t_peak_ns, m.family_id FROM family_members m JOIN triggers t ON t.id = m.trigger_id
         WHERE m.family_id IS NOT NULL ORDER BY t.t_peak_ns",
    )?;
    let members: Vec<(f64, i64)> = st
        .query_map([], |r| Ok((catalogue::from_ns(r.get(0)?), r.get(1)?)))?
        .collect::<rusqlite::Result<_>>()?;
    let names: Vec<&str> = {
        let mut v: Vec<&str> = truth.iter().map(|g| g.family.as_str()).collect();
        v.sort();
        v.dedup();
        v
    };
    let (mut a, mut b) = (Vec::new(), Vec::new());
    let mut tally: HashMap<(String, i64), usize> = HashMap::new();
    for g in truth {
        let i = members.partition_point(|m| m.0 < g.t_peak_gps - 0.1);
        if let Some(&(t, fam)) = members.get(i) {
            if t <= g.t_peak_gps + 0.1 {
                a.push(names.iter().position(|n| *n == g.family).unwrap_or(0) as i64);
                b.push(fam);
                *tally.entry((g.family.clone(), fam)).or_default() += 1;
            }
        }
    }
    if a.is_empty() {
        bail!("no clustered trigger matches the scenario's glitches");
    }
    say(format!(
        "   adjusted Rand index vs ground truth over {} matched triggers: {:.3}",
        a.len(),
        adjusted_rand_index(&a, &b)
    ));
    // (family, scenario name, count) of each scenario family's dominant family.
    let mut dominant: Vec<(i64, String, usize)> = Vec::new();
    for name in &names {
        let total: usize = tally
            .iter()
            .filter(|((n, _), _)| n == name)
            .map(|(_, c)| c)
            .sum();
        if let Some(((_, fam), c)) = tally
            .iter()
            .filter(|((n, _), _)| n == name)
            .max_by_key(|(_, c)| **c)
        {
            say(format!(
                "   scenario family {name}: {c}/{total} = {:.0}% in family {fam}",
                100.0 * *c as f64 / total as f64
            ));
            dominant.push((*fam, name.to_string(), *c));
        }
    }
    // A family that is the dominant one of several scenario families gets
    // all their names, largest first (e.g. "pebble+moth" when two merge).
    dominant.sort_by(|a, b| a.0.cmp(&b.0).then(b.2.cmp(&a.2)));
    let mut out: Vec<(i64, String)> = Vec::new();
    for (fam, name, _) in dominant {
        match out.last_mut() {
            Some((f, joined)) if *f == fam => {
                joined.push('+');
                joined.push_str(&name);
            }
            _ => out.push((fam, name)),
        }
    }
    Ok(out)
}
