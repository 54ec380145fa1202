//! Scale-out commands: `plan` (and `plan status`), `run-plan`, `merge`,
//! and two hidden helpers for the end-to-end
//! check (`demo-data`, `compare-catalogues`).
use super::common::{shard_command, ScanFlags};
use super::{warn, Global};
use anyhow::{bail, Result};
use glitchbook::plan::{self, PlanOptions, ShardState, SlurmOptions};
use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::ExitCode;
use std::time::Instant;

/// Split a scan of one or more bundles into shards (time pieces × channel
/// groups) and write a work directory: `plan.json`, a Slurm job-array
/// script `run-array.sh` and `README.txt`.
#[derive(Debug, clap::Args)]
#[command(
    allow_negative_numbers = true,
    args_conflicts_with_subcommands = true,
    subcommand_negates_reqs = true
)]
pub struct PlanArgs {
    /// `plan status DIR`.
    #[command(subcommand)]
    pub sub: Option<PlanSub>,
    /// Bundle directories.
    #[arg(value_name = "BUNDLE", required = true)]
    pub bundles: Vec<PathBuf>,
    /// Work directory to write.
    #[arg(long, value_name = "DIR", required = true)]
    pub out: Option<PathBuf>,
    /// Number of time pieces [default: 1].
    #[arg(long, value_name = "N", conflicts_with = "span")]
    pub shards: Option<usize>,
    /// Length of a time piece [s] (instead of --shards).
    #[arg(long, value_name = "SECONDS")]
    pub span: Option<f64>,
    /// Number of channel groups; shards = time pieces × groups.
    #[arg(long, value_name = "N", default_value_t = 1)]
    pub channel_groups: usize,
    /// Analysis segments file (`start end` lines, GPS s) [default: all valid data].
    #[arg(long, value_name = "FILE")]
    pub segments: Option<PathBuf>,
    /// Scan parameters (as in `scan`).
    #[command(flatten)]
    pub scan: ScanFlags,
    /// Slurm partition [default: the cluster's default].
    #[arg(long, value_name = "P")]
    pub partition: Option<String>,
    /// Wall-clock limit per shard (Slurm `--time`, e.g. 02:00:00).
    #[arg(long, value_name = "T", default_value = "02:00:00")]
    pub time_limit: String,
    /// Memory per shard [MB].
    #[arg(long, value_name = "M", default_value_t = 2000)]
    pub mem_mb: u64,
    /// CPUs per shard (threads of one shard's scan).
    #[arg(long, value_name = "C", default_value_t = 2)]
    pub cpus: u32,
    /// At most this many shards running at once on Slurm.
    #[arg(long, value_name = "N")]
    pub max_parallel: Option<usize>,
    /// glitchbook executable the batch script runs [default: this one].
    #[arg(long, value_name = "PATH")]
    pub exe: Option<PathBuf>,
}

/// Subcommands of `plan`.
#[derive(Debug, clap::Subcommand)]
pub enum PlanSub {
    /// Done / failed / missing shards of a work directory, with log paths
    /// (exit status 1 when a shard failed).
    Status(StatusArgs),
}

/// `plan status DIR`.
#[derive(Debug, clap::Args)]
pub struct StatusArgs {
    /// The work directory written by `plan`.
    pub dir: PathBuf,
}

impl PlanArgs {
    /// The plan options these flags set, checked by the library
    /// ([`PlanOptions::check`]; no I/O).
    pub fn validate(&self) -> Result<PlanOptions> {
        let exe = match &self.exe {
            Some(p) => p.clone(),
            None => std::env::current_exe()?,
        };
        let opts = PlanOptions {
            shards: if self.span.is_some() {
                None
            } else {
                Some(self.shards.unwrap_or(1))
            },
            span_s: self.span,
            channel_groups: self.channel_groups,
            params: self.scan.validate()?,
            segments: self.segments.clone(),
            slurm: SlurmOptions {
                partition: self.partition.clone(),
                time_limit: self.time_limit.clone(),
                mem_mb: self.mem_mb,
                cpus: self.cpus,
                max_parallel: self.max_parallel,
                exe: exe.display().to_string(),
                ..SlurmOptions::default()
            },
        };
        opts.check()?;
        Ok(opts)
    }
}

/// Run `plan` or `plan status`.
pub fn run(g: &Global, args: PlanArgs) -> Result<ExitCode> {
    if let Some(PlanSub::Status(s)) = &args.sub {
        return run_status(&s.dir);
    }
    let opts = args.validate()?;
    let Some(out) = &args.out else {
        bail!("plan: --out DIR is required");
    };
    if out.join("plan.json").exists() {
        bail!(
            "{}: already holds a plan (its shard catalogues would be mixed with the new \
             plan's); choose another --out or remove it",
            out.join("plan.json").display()
        );
    }
    let t0 = Instant::now();
    let p = plan::make_plan(&args.bundles, &opts, out, &shard_command())?;
    let dir = std::fs::canonicalize(out).unwrap_or_else(|_| out.clone());
    g.info(&format!(
        "plan {}: {} shards over {} channels in {:.1} s",
        p.plan_id,
        p.shards.len(),
        p.channels.len(),
        t0.elapsed().as_secs_f64()
    ));
    writeln!(std::io::stdout(), "{}", dir.join("run-array.sh").display())?;
    g.info(&format!(
        "next: sbatch --wait {0}/run-array.sh  (or: glitchbook run-plan {0} --jobs J), \
         then glitchbook merge {0} --into CATALOGUE",
        dir.display()
    ));
    Ok(ExitCode::SUCCESS)
}

fn run_status(dir: &Path) -> Result<ExitCode> {
    let st = plan::status(dir)?;
    print!("{}", plan::status_text(&st));
    Ok(if st.iter().any(|s| s.state == ShardState::Failed) {
        ExitCode::from(1)
    } else {
        ExitCode::SUCCESS
    })
}

/// Run the shards of a plan on this machine.
#[derive(Debug, clap::Args)]
pub struct RunPlanArgs {
    /// The work directory written by `plan`.
    pub dir: PathBuf,
    /// Shards run at once (each one a `glitchbook scan --shard K` process).
    #[arg(long, value_name = "J", default_value_t = 1)]
    pub jobs: usize,
}

/// Run `run-plan`: every shard not yet done, `--jobs` at a time; prints the
/// status and exits 1 when a shard failed.
pub fn run_plan(g: &Global, args: RunPlanArgs) -> Result<ExitCode> {
    if args.jobs == 0 {
        bail!("--jobs must be at least 1");
    }
    let before = plan::status(&args.dir)?;
    let todo = before
        .iter()
        .filter(|s| s.state != ShardState::Done)
        .count();
    let exe = std::env::current_exe()?;
    let t0 = Instant::now();
    let res = plan::run_local(&args.dir, args.jobs, &exe, &shard_command());
    let secs = t0.elapsed().as_secs_f64();
    let st = plan::status(&args.dir)?;
    print!("{}", plan::status_text(&st));
    g.info(&format!(
        "ran {todo} shards in {secs:.1} s with {} at a time ({:.1} shards/min)",
        args.jobs,
        if secs > 0.0 {
            todo as f64 * 60.0 / secs
        } else {
            0.0
        }
    ));
    match res {
        Ok(_) => Ok(ExitCode::SUCCESS),
        Err(e) if st.iter().any(|s| s.state != ShardState::Done) => {
            warn(&format!("{e:#}"));
            Ok(ExitCode::from(1))
        }
        Err(e) => Err(e),
    }
}

/// Merge the shard catalogues of a plan into one catalogue.
#[derive(Debug, clap::Args)]
pub struct MergeArgs {
    /// The work directory written by `plan`.
    pub dir: PathBuf,
    /// Catalogue to merge into [default: the global --db].
    #[arg(long, value_name = "CATALOGUE")]
    pub into: Option<PathBuf>,
    /// Merge shards made with other parameters or another tool version
    /// (recorded in the catalogue).
    #[arg(long)]
    pub force: bool,
}

/// Run `merge`; exits 1 when shards are missing (the rest is merged).
pub fn run_merge(g: &Global, args: MergeArgs) -> Result<ExitCode> {
    let into = args.into.clone().unwrap_or_else(|| g.db.clone());
    let t0 = Instant::now();
    let rep = plan::merge(&args.dir, &into, args.force)?;
    print!("{rep}");
    g.info(&format!(
        "merged into {} in {:.1} s",
        into.display(),
        t0.elapsed().as_secs_f64()
    ));
    Ok(if rep.missing.is_empty() {
        ExitCode::SUCCESS
    } else {
        ExitCode::from(1)
    })
}

/// Write the demo bundle (hidden helper for the end-to-end scripts).
#[derive(Debug, clap::Args)]
pub struct DemoDataArgs {
    /// Output directory.
    #[arg(long, value_name = "DIR")]
    pub out: PathBuf,
    /// Length [h] (0.05 to 4).
    #[arg(long, value_name = "H", default_value_t = 0.1)]
    pub hours: f64,
    /// Random seed.
    #[arg(long, value_name = "N", default_value_t = 1)]
    pub seed: u64,
}

/// Run `demo-data`.
pub fn run_demo_data(g: &Global, args: DemoDataArgs) -> Result<ExitCode> {
    let s = glitchbook::demo::write_scenario(
        &args.out,
        &glitchbook::demo::DemoOptions {
            seed: args.seed,
            hours: args.hours,
        },
    )?;
    g.info(&format!(
        "demo bundle in {} ({} channels, {:.0} s) in {:.1} s",
        s.dir.display(),
        s.channels.len(),
        s.end_gps - s.start_gps,
        s.elapsed_s
    ));
    Ok(ExitCode::SUCCESS)
}

/// Compare the triggers of two catalogues (hidden helper for the end-to-end
/// check): per channel the same count, peaks within one tile and the same
/// analysed time, else exit 1.
#[derive(Debug, clap::Args)]
pub struct CompareArgs {
    /// First catalogue (the reference, e.g. the one-go scan).
    pub a: PathBuf,
    /// Second catalogue (e.g. the merged shards).
    pub b: PathBuf,
}

/// Run `compare-catalogues`.
pub fn run_compare(_g: &Global, args: CompareArgs) -> Result<ExitCode> {
    let c = plan::compare_catalogues(&args.a, &args.b)?;
    print!("{c}");
    Ok(if c.ok() {
        ExitCode::SUCCESS
    } else {
        ExitCode::from(1)
    })
}

#[cfg(test)]
mod tests {
    use crate::cli::{Cli, Command};
    use clap::Parser;

    fn parse(argv: &[&str]) -> Result<Command, clap::Error> {
        Cli::try_parse_from(argv).map(|c| c.command)
    }

    #[test]
    fn plan_defaults_match_scan_defaults() {
        let Command::Plan(a) = parse(&["glitchbook", "plan", "b", "--out", "d"]).unwrap() else {
            panic!("not plan")
        };
        assert!(a.sub.is_none());
        let o = a.validate().unwrap();
        assert_eq!(o.params, glitchbook::scan::ScanParams::default());
        assert_eq!(o.shards, Some(1));
        assert_eq!(o.channel_groups, 1);
    }

    #[test]
    fn plan_status_is_a_subcommand() {
        let Command::Plan(a) = parse(&["glitchbook", "plan", "status", "w"]).unwrap() else {
            panic!("not plan")
        };
        match a.sub {
            Some(super::PlanSub::Status(s)) => assert_eq!(s.dir, std::path::Path::new("w")),
            None => panic!("status not parsed"),
        }
    }

    #[test]
    fn plan_bad_flags_refused() {
        let e = |x: &[&str]| {
            let mut argv = vec!["glitchbook", "plan", "b", "--out", "d"];
            argv.extend_from_slice(x);
            match parse(&argv) {
                Ok(Command::Plan(a)) => crate::cli::error_message(&a.validate().unwrap_err()),
                Ok(_) => panic!("not plan"),
                Err(e) => e.to_string(),
            }
        };
        assert!(e(&["--shards", "0"]).contains("--shards"));
        assert!(e(&["--span", "-5"]).contains("--span"));
        assert!(e(&["--channel-groups", "0"]).contains("--channel-groups"));
        assert!(e(&["--qmin", "1"]).contains("at least 2"));
        assert!(e(&["--time-limit", "2h"]).contains("--time-limit"));
        assert!(e(&["--shards", "2", "--span", "60"]).contains("cannot be used with"));
        assert!(parse(&["glitchbook", "plan", "--out", "d"]).is_err());
    }

    #[test]
    fn scan_shard_takes_nothing_but_plan() {
        assert!(parse(&["glitchbook", "scan", "--shard", "3", "--plan", "w"]).is_ok());
        assert!(parse(&["glitchbook", "scan", "--shard", "3"]).is_err());
        assert!(parse(&["glitchbook", "scan", "b", "--shard", "3", "--plan", "w"]).is_err());
        assert!(parse(&[
            "glitchbook",
            "scan",
            "--shard",
            "3",
            "--plan",
            "w",
            "--fmin",
            "9"
        ])
        .is_err());
        assert!(parse(&["glitchbook", "scan"]).is_err());
    }
}
