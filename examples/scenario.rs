//! Write the second scenario (the invented Quarry Meadow site, `QM4:`), run
//! the tool's stages on it, or score a catalogue against its truth.
//!
//! ```sh
//! cargo run --release --example scenario -- write --out qm4 [--seed 1] [--hours 2] [--days 1] [--noise-only]
//! cargo run --release --example scenario -- run --out qm4 [--seed 1] [--hours 2]   # write, scan, cluster, witnesses, vetoes, score
//! cargo run --release --example scenario -- score qm4 --db glitchbook.db          # after `glitchbook scan qm4 --segments qm4/segments.txt; glitchbook cluster`
//! ```
//! `score` reads the catalogue only (triggers and families); witnesses and
//! vetoes are scored by `run`, which has the reports in hand.
use anyhow::Result;
use clap::{Parser, Subcommand};
use glitchbook::scenario::pipeline::{run_stages, StageOptions};
use glitchbook::scenario::score::{score_catalogue, ScoreParams};
use glitchbook::scenario::{write_scenario, ScenarioOptions};
use std::path::PathBuf;

#[derive(Parser)]
#[command(about = "glitchbook's second scenario (invented site QM4)")]
struct Cli {
    #[command(subcommand)]
    cmd: Cmd,
}

#[derive(clap::Args)]
struct WriteArgs {
    /// Output directory.
    #[arg(long, default_value = "glitchbook-scenario")]
    out: PathBuf,
    /// Seed.
    #[arg(long, default_value_t = 1)]
    seed: u64,
    /// Length [h] (0.05 to 24).
    #[arg(long, default_value_t = 2.0)]
    hours: f64,
    /// Split into this many consecutive bundles (day-01, ...).
    #[arg(long, default_value_t = 1)]
    days: usize,
    /// Write the noise alone (truth still lists what was drawn).
    #[arg(long)]
    noise_only: bool,
}

#[derive(Subcommand)]
enum Cmd {
    /// Write the scenario.
    Write(WriteArgs),
    /// Write it, run scan/cluster/witnesses/vetoes through the library into
    /// OUT/glitchbook.db (made afresh) and print the scores.
    Run(WriteArgs),
    /// Score a catalogue's triggers and families against a written scenario.
    Score {
        /// The scenario directory.
        dir: PathBuf,
        /// The catalogue.
        #[arg(long, default_value = "glitchbook.db")]
        db: PathBuf,
    },
}

fn peak_rss_mib() -> Option<f64> {
    let status = std::fs::read_to_string("/proc/self/status").ok()?;
    let line = status.lines().find(|l| l.starts_with("VmHWM:"))?;
    let kib: f64 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kib / 1024.0)
}

fn write(a: &WriteArgs) -> Result<glitchbook::scenario::ScenarioSummary> {
    let s = write_scenario(
        &a.out,
        &ScenarioOptions {
            seed: a.seed,
            hours: a.hours,
            days: a.days,
            inject: !a.noise_only,
            ..ScenarioOptions::default()
        },
    )?;
    println!(
        "wrote {:.2} h of the QM4 scenario (seed {}) to {} in {:.1} s, peak RSS {:.0} MiB",
        (s.end_gps - s.start_gps) / 3600.0,
        s.seed,
        s.dir.display(),
        s.elapsed_s,
        peak_rss_mib().unwrap_or(f64::NAN)
    );
    for m in &s.mechanisms {
        println!(
            "  {:<9} {:>4} injected, {:>4} in trains, {:>4} witnessed{}",
            m.name,
            m.n_injected,
            m.n_in_trains,
            m.n_witnessed,
            m.witness_channel
                .as_ref()
                .map(|c| format!(" ({c})"))
                .unwrap_or_default()
        );
    }
    println!("see {}", s.readme_txt.display());
    Ok(s)
}

fn main() -> Result<()> {
    match Cli::parse().cmd {
        Cmd::Write(a) => {
            write(&a)?;
        }
        Cmd::Run(a) => {
            let s = write(&a)?;
            let db = a.out.join("glitchbook.db");
            for suffix in ["", "-wal", "-shm"] {
                let _ = std::fs::remove_file(format!("{}{suffix}", db.display()));
            }
            let o = StageOptions {
                cluster: glitchbook::families::ClusterParams {
                    seed: a.seed,
                    ..Default::default()
                },
                ..StageOptions::default()
            };
            let r = run_stages(&s, &db, &o)?;
            println!(
                "stages: scan {:.1} s ({} triggers), cluster {:.1} s ({} families), witnesses {:.1} s, vetoes {:.1} s",
                r.times.scan_s,
                r.n_triggers,
                r.times.cluster_s,
                r.n_families.unwrap_or(0),
                r.times.witnesses_s,
                r.times.vetoes_s
            );
            print!("{}", r.score.render());
        }
        Cmd::Score { dir, db } => {
            let conn = glitchbook::catalogue::open_existing(&db)?;
            let s = score_catalogue(&conn, &dir, None, None, &ScoreParams::default())?;
            print!("{}", s.render());
        }
    }
    Ok(())
}
