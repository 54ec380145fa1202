//! The whole loop on the demo scenario, and its scoring against the
//! scenario's ground truth: write the scenario ([`crate::demo`]), scan every
//! channel inside the analysis segments and record the scans
//! ([`crate::catalogue::record_scans`]), sort target triggers into families,
//! name them after the scenario families they hold, find witnesses, propose
//! vetoes (safety against the scenario's injections), rates and change
//! points, and the report. [`run_demo`] is what `glitchbook demo` runs;
//! [`recall`] and [`score_families`] are the checks it prints (and the
//! families test asserts).
//!
//! Progress goes to a caller's callback as it happens ([`DemoLine`]), so the
//! binary prints it; the figures come back in [`DemoRun`].

use crate::catalogue::{self, InsertOutcome};
use crate::coupling::{self, VetoParams, WitnessParams};
use crate::demo::{self, DemoOptions, ScenarioSummary, TruthGlitch};
use crate::families::{self, metrics::adjusted_rand_index, ClusterParams};
use crate::io::{read_injections, read_segments_file, Bundle};
use crate::maps::BundleMaps;
use crate::rates::{self, RateParams};
use crate::report::{self, ReportParams};
use crate::scan::{scan_channel, ChannelScan, ScanParams};
use anyhow::{bail, Context, Result};
use rusqlite::Connection;
use std::collections::HashMap;
use std::path::PathBuf;
use std::time::Instant;

/// Where and what [`run_demo`] runs.
#[derive(Debug, Clone, PartialEq)]
pub struct DemoRunOptions {
    /// Directory for the scenario, veto segments and report.
    pub out: PathBuf,
    /// The catalogue file. One inside `out` is made afresh each run.
    pub db: PathBuf,
    /// Seed of the scenario and of the clustering.
    pub seed: u64,
    /// Length of the scenario \[h\] (0.05 to 4).
    pub hours: f64,
    /// Write the channels as frame files (`DIR/frames/*.gwf`, see
    /// [`demo::convert_to_frames`]) instead of `.npy` files.
    pub frames: bool,
}

/// A line of progress from [`run_demo`].
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum DemoLine {
    /// What was done (for standard output).
    Info(String),
    /// Something the user should know (for standard error).
    Warning(String),
}

/// Scoring of families against the scenario's ground truth.
#[derive(Debug, Clone, PartialEq)]
pub struct FamilyScore {
    /// Injected glitches matched to a clustered trigger (peak within 0.1 s).
    pub n_matched: usize,
    /// Adjusted Rand index (Hubert & Arabie 1985) of the families against
    /// the scenario families over the matched triggers.
    pub ari: f64,
    /// Each scenario family's dominant family, by scenario name.
    pub shares: Vec<TruthShare>,
}

/// Where one scenario family's matched triggers went.
#[derive(Debug, Clone, PartialEq)]
pub struct TruthShare {
    /// Scenario family name.
    pub name: String,
    /// The family holding most of its matched triggers.
    pub dominant_family: i64,
    /// Matched triggers in that family.
    pub n_dominant: usize,
    /// Matched triggers in all.
    pub n_matched: usize,
}

impl TruthShare {
    /// Fraction of the matched triggers in the dominant family.
    pub fn share(&self) -> f64 {
        self.n_dominant as f64 / self.n_matched.max(1) as f64
    }
}

impl FamilyScore {
    /// (family id, name) for every family that is the dominant family of a
    /// scenario family, by id; a family dominant for several scenario
    /// families gets all their names, largest first (e.g. "pebble+moth").
    pub fn family_names(&self) -> Vec<(i64, String)> {
        let mut dominant: Vec<(i64, &str, usize)> = self
            .shares
            .iter()
            .map(|s| (s.dominant_family, s.name.as_str(), s.n_dominant))
            .collect();
        dominant.sort_by(|a, b| a.0.cmp(&b.0).then(b.2.cmp(&a.2)));
        let mut out: Vec<(i64, String)> = Vec::new();
        for (fam, name, _) in dominant {
            match out.last_mut() {
                Some((f, joined)) if *f == fam => {
                    joined.push('+');
                    joined.push_str(name);
                }
                _ => out.push((fam, name.to_string())),
            }
        }
        out
    }
}

/// What [`run_demo`] did.
#[derive(Debug, Clone)]
pub struct DemoRun {
    /// The scenario written.
    pub scenario: ScenarioSummary,
    /// The catalogue.
    pub catalogue: PathBuf,
    /// Triggers recorded over all channels.
    pub n_triggers: usize,
    /// Injected target glitches with SNR ≥ 8 in analysed time found, and how many.
    pub recall: (usize, usize),
    /// Families against the ground truth.
    pub families: FamilyScore,
    /// The report's `index.html`.
    pub report_index: PathBuf,
}

/// SNR above which injected target glitches count for [`recall`] in the demo.
pub const DEMO_RECALL_MIN_SNR: f64 = 8.0;

/// Write the demo scenario and run the whole loop on it (see the module
/// doc); `on_line` receives progress as it happens.
///
/// # Errors
/// Bad options (hours outside 0.05–4), unwritable directories, or any
/// stage's error.
pub fn run_demo(o: &DemoRunOptions, on_line: &mut dyn FnMut(DemoLine)) -> Result<DemoRun> {
    let t_all = Instant::now();
    let mut say = |m: String| on_line(DemoLine::Info(m));
    std::fs::create_dir_all(&o.out).with_context(|| format!("creating {}", o.out.display()))?;
    if o.db.starts_with(&o.out) {
        for suffix in ["", "-wal", "-shm"] {
            let p = PathBuf::from(format!("{}{suffix}", o.db.display()));
            if p.exists() {
                std::fs::remove_file(&p).with_context(|| format!("removing {}", p.display()))?;
            }
        }
    }

    // 1. Scenario.
    let t = Instant::now();
    let sc = demo::write_scenario(
        &o.out,
        &DemoOptions {
            seed: o.seed,
            hours: o.hours,
        },
    )?;
    say(format!(
        "1. scenario: {:.1} h of the invented Ashgrove Valley observatory, {} channels, written to {} ({:.1} s)",
        (sc.end_gps - sc.start_gps) / 3600.0,
        sc.channels.len(),
        sc.dir.display(),
        t.elapsed().as_secs_f64()
    ));

    if o.frames {
        let t = Instant::now();
        let files = demo::convert_to_frames(&o.out, demo::DEMO_FRAME_S)?;
        say(format!(
            "   as frame files: {} files of {} s in {} ({:.1} s)",
            files.len(),
            demo::DEMO_FRAME_S,
            o.out.join("frames").display(),
            t.elapsed().as_secs_f64()
        ));
    }

    // 2. Scan every channel inside the analysis segments.
    let t = Instant::now();
    let bundle = Bundle::open(&o.out)?;
    let (segments, warnings) = read_segments_file(&sc.segments_txt)?;
    for w in warnings {
        on_line(DemoLine::Warning(w));
    }
    let mut say = |m: String| on_line(DemoLine::Info(m));
    let bundle_dir = std::fs::canonicalize(&o.out)?;
    let params = ScanParams::default();
    let scans = bundle
        .channels
        .iter()
        .map(|spec| {
            scan_channel(spec, &params, Some(&segments), &|_| {}).map(|s| (s, bundle_dir.clone()))
        })
        .collect::<Result<Vec<_>>>()?;
    let mut conn = catalogue::open(&o.db)?;
    let n_triggers: usize = catalogue::record_scans(&mut conn, &scans, |_| Ok(()))?
        .iter()
        .map(|r| match r {
            InsertOutcome::Inserted { n_triggers, .. } => *n_triggers,
            InsertOutcome::Skipped { .. } => 0,
        })
        .sum();
    say(format!(
        "2. scan: {n_triggers} triggers in {} channels ({:.1} s)",
        scans.len(),
        t.elapsed().as_secs_f64()
    ));
    let target = scans
        .iter()
        .map(|s| &s.0)
        .find(|s| s.channel.name == demo::TARGET_CHANNEL)
        .context("the demo bundle has no target channel")?;
    let truth = demo::read_truth(&sc.truth_csv)?;
    let (found, eligible) = recall(&truth, target, DEMO_RECALL_MIN_SNR);
    say(format!(
        "   recall of injected target glitches with SNR >= 8 inside analysed time: {found}/{eligible} = {:.1}%",
        100.0 * found as f64 / eligible.max(1) as f64
    ));

    // 3. Families.
    let t = Instant::now();
    let src = BundleMaps::from_catalogue(&conn)?;
    let cp = ClusterParams {
        seed: o.seed,
        ..ClusterParams::default()
    };
    let rep = families::cluster_catalogue(&mut conn, &cp, &src)?;
    let agreement = rep
        .starts
        .iter()
        .find(|s| s.chosen)
        .map_or(1.0, |s| s.agreement);
    say(format!(
        "3. families: {} triggers with SNR >= {} sorted into {} families ({:.1} s); \
         {} seeded starts, the kept one agrees with the others to ARI {agreement:.2}",
        rep.n_clustered,
        cp.min_snr,
        rep.families.len(),
        t.elapsed().as_secs_f64(),
        rep.starts.len()
    ));
    let score = score_families(&conn, &truth)?;
    say(format!(
        "   adjusted Rand index vs ground truth over {} matched triggers: {:.3}",
        score.n_matched, score.ari
    ));
    for s in &score.shares {
        say(format!(
            "   scenario family {}: {}/{} = {:.0}% in family {}",
            s.name,
            s.n_dominant,
            s.n_matched,
            100.0 * s.share(),
            s.dominant_family
        ));
    }
    // Name each family after the scenario families it holds most of, to
    // show labels; in real use people name families.
    let names = score.family_names();
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
    let veto_dir = o.out.join("vetoes");
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
                "   family {fam} ({name}): best witness {} (aux SNR >= {}, window {} s, efficiency {:.2}, false alarm {:.1e}{}{})",
                best.aux_channel,
                crate::output::fixed(best.aux_min_snr, 2),
                best.window_s,
                best.efficiency,
                best.false_alarm_any,
                if best.false_alarm_basis == coupling::background::FalseAlarmBasis::SlidesTail {
                    " from the analytic tail, beyond the time slides' resolution"
                } else {
                    ""
                },
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
            coupling::lag::LAG_DEFINITION,
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
    let report_dir = o.out.join("report");
    let data = report::gather(
        &conn,
        &ReportParams {
            catalogue: o.db.display().to_string(),
            ..ReportParams::default()
        },
    )?;
    let (thumbs, missing) = families::report_thumbnails(
        &conn,
        &report_dir,
        &data.family_ids(),
        &data.witnessed_families(),
    )?;
    if let Some(why) = missing {
        on_line(DemoLine::Warning(why));
    }
    let mut say = |m: String| on_line(DemoLine::Info(m));
    let index = report::write_report(&data, &report_dir, &thumbs)?;
    say(format!(
        "6. report: {} ({:.1} s)",
        index.display(),
        t.elapsed().as_secs_f64()
    ));
    say(format!(
        "done in {:.1} s. Catalogue: {} (try: glitchbook --db {} families)",
        t_all.elapsed().as_secs_f64(),
        o.db.display(),
        o.db.display()
    ));
    Ok(DemoRun {
        scenario: sc,
        catalogue: o.db.clone(),
        n_triggers,
        recall: (found, eligible),
        families: score,
        report_index: index,
    })
}

/// Injected target glitches with SNR ≥ `min_snr` inside the scan's analysed
/// time, and how many of them have a trigger peaking within 0.1 s: (found,
/// eligible).
pub fn recall(truth: &[TruthGlitch], scan: &ChannelScan, min_snr: f64) -> (usize, usize) {
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

/// (peak time \[GPS s\], family id) of every trigger in a family, by time.
fn clustered_members(conn: &Connection) -> Result<Vec<(f64, i64)>> {
    let mut st = conn.prepare(
        "SELECT t.t_peak_ns, m.family_id FROM family_members m JOIN triggers t ON t.id = m.trigger_id
         WHERE m.family_id IS NOT NULL ORDER BY t.t_peak_ns",
    )?;
    let members = st
        .query_map([], |r| Ok((catalogue::from_ns(r.get(0)?), r.get(1)?)))?
        .collect::<rusqlite::Result<_>>()?;
    Ok(members)
}

/// Compare the catalogue's families with a scenario's ground truth over
/// the injected glitches matched to a clustered trigger (the first trigger
/// peaking within 0.1 s): the adjusted Rand index and, for each scenario
/// family (by name), its dominant family.
///
/// # Errors
/// No clustered trigger matches a glitch; SQLite errors.
pub fn score_families(conn: &Connection, truth: &[TruthGlitch]) -> Result<FamilyScore> {
    let members = clustered_members(conn)?;
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
    let mut shares = Vec::new();
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
            shares.push(TruthShare {
                name: name.to_string(),
                dominant_family: *fam,
                n_dominant: *c,
                n_matched: total,
            });
        }
    }
    Ok(FamilyScore {
        n_matched: a.len(),
        ari: adjusted_rand_index(&a, &b),
        shares,
    })
}
