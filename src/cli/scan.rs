//! `glitchbook scan`: search bundle channels for transients and record them.
use super::common::ScanFlags;
use super::{warn, Global};
use anyhow::{bail, Result};
use glitchbook::catalogue::{self, InsertOutcome};
use glitchbook::io::{self, Bundle, ChannelSpec};
use glitchbook::scan::{scan_channel, ChannelScan, ScanParams};
use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::process::ExitCode;
use std::time::Instant;

/// Search channels of a bundle (a directory with `bundle.toml` and `.npy`
/// files) with the multi-resolution Q-transform and record the triggers.
#[derive(Debug, clap::Args)]
#[command(allow_negative_numbers = true)]
pub struct ScanArgs {
    /// The bundle directory.
    #[arg(required_unless_present = "plan")]
    pub bundle: Option<PathBuf>,
    /// Scan only this channel (repeatable) [default: every channel].
    #[arg(long = "channel", value_name = "NAME")]
    pub channels: Vec<String>,
    /// Analysis segments file (`start end` lines, GPS s) [default: all valid data].
    #[arg(long, value_name = "FILE")]
    pub segments: Option<PathBuf>,
    /// Scan parameters.
    #[command(flatten)]
    pub params: ScanFlags,
    /// Scan shard K of the plan in --plan DIR into DIR/shards/shard-K.db
    /// (everything else comes from the plan).
    #[arg(long, value_name = "K", requires = "plan", conflicts_with_all = ["bundle", "channels", "segments", "snr_threshold", "fmin", "fmax", "qmin", "qmax", "mismatch", "block_s"])]
    pub shard: Option<usize>,
    /// Work directory written by `plan` (with --shard).
    #[arg(long, value_name = "DIR", requires = "shard")]
    pub plan: Option<PathBuf>,
}

impl ScanArgs {
    /// Check the flags (no I/O) and build the scan parameters.
    pub fn validate(&self) -> Result<ScanParams> {
        self.params.validate()
    }
}

/// The bundle channels named by `--channel` (all when none named).
fn select<'a>(bundle: &'a Bundle, names: &[String]) -> Result<Vec<&'a ChannelSpec>> {
    if names.is_empty() {
        return Ok(bundle.channels.iter().collect());
    }
    let mut out: Vec<&ChannelSpec> = Vec::new();
    for n in names {
        match bundle.channels.iter().find(|c| &c.name == n) {
            Some(c) if !out.iter().any(|o| o.name == c.name) => out.push(c),
            Some(_) => {}
            None => {
                let known: Vec<&str> = bundle.channels.iter().map(|c| c.name.as_str()).collect();
                bail!(
                    "{}: no channel named {n:?} (channels: {})",
                    bundle.dir.join("bundle.toml").display(),
                    known.join(", ")
                );
            }
        }
    }
    Ok(out)
}

fn progress_bar(g: &Global, name: &str) -> indicatif::ProgressBar {
    if g.quiet || !std::io::stderr().is_terminal() {
        return indicatif::ProgressBar::hidden();
    }
    let pb = indicatif::ProgressBar::new(1000);
    if let Ok(style) =
        indicatif::ProgressStyle::with_template("{msg} [{bar:40}] {percent:>3}% {elapsed}")
    {
        pb.set_style(style);
    }
    pb.set_message(format!("scanning {name}"));
    pb
}

/// `scan --shard K --plan DIR`: scan shard K and write the plan's own
/// catalogue for it, `DIR/shards/shard-K.db` (the global --db is not used).
pub fn run_shard(g: &Global, k: usize, dir: &Path) -> Result<ExitCode> {
    let t0 = Instant::now();
    let db = glitchbook::plan::run_shard(dir, k)?;
    let same = |a: &Path, b: &Path| {
        std::fs::canonicalize(a)
            .ok()
            .zip(std::fs::canonicalize(b).ok())
            .is_some_and(|(x, y)| x == y)
    };
    if !same(&g.db, &db) && g.db != Path::new("glitchbook.db") {
        warn(&format!(
            "--db {} is not used with --shard: the shard catalogue is {}",
            g.db.display(),
            db.display()
        ));
    }
    g.info(&format!(
        "shard {k}: wrote {} in {:.1} s",
        db.display(),
        t0.elapsed().as_secs_f64()
    ));
    Ok(ExitCode::SUCCESS)
}

/// Run the command. Channels are scanned one after another (each scan uses
/// every core); all results are written in one transaction at the end.
pub fn run(g: &Global, args: ScanArgs) -> Result<ExitCode> {
    if let (Some(k), Some(dir)) = (args.shard, &args.plan) {
        return run_shard(g, k, dir);
    }
    let params = args.validate()?;
    let Some(bundle_arg) = args.bundle.clone() else {
        bail!("scan: give a BUNDLE directory (or --shard K --plan DIR)");
    };
    let bundle = Bundle::open(&bundle_arg)?;
    // Record the absolute path: later commands (cluster, thumbnails) reopen the data.
    let bundle_dir = std::fs::canonicalize(&bundle_arg).unwrap_or(bundle_arg);
    let chosen = select(&bundle, &args.channels)?;
    let segments = match &args.segments {
        Some(p) => {
            let (segs, warnings) = io::read_segments_file(p)?;
            for w in &warnings {
                warn(w);
            }
            Some(segs)
        }
        None => None,
    };
    let mut results: Vec<ChannelScan> = Vec::with_capacity(chosen.len());
    for spec in chosen {
        let pb = progress_bar(g, &spec.name);
        let report = |f: f64| pb.set_position((f.clamp(0.0, 1.0) * 1000.0) as u64);
        let r = scan_channel(spec, &params, segments.as_ref(), &report)?;
        pb.finish_and_clear();
        results.push(r);
    }
    let mut conn = catalogue::open(&g.db)?;
    let scans: Vec<(ChannelScan, PathBuf)> = results
        .into_iter()
        .map(|r| (r, bundle_dir.clone()))
        .collect();
    let outcomes = catalogue::record_scans(&mut conn, &scans, |_| Ok(()))?;
    for ((r, _), outcome) in scans.iter().zip(outcomes) {
        g.info(&match outcome {
            InsertOutcome::Inserted { n_triggers, .. } => format!(
                "{}: {n_triggers} triggers in {:.1} s analysed",
                r.channel.name,
                r.analysed.total()
            ),
            InsertOutcome::Skipped { .. } => {
                format!("{}: {}", r.channel.name, InsertOutcome::SKIPPED_MESSAGE)
            }
        });
    }
    Ok(ExitCode::SUCCESS)
}

#[cfg(test)]
mod tests {
    use super::*;
    use clap::Parser;

    fn parse(extra: &[&str]) -> Result<ScanParams> {
        let mut argv = vec!["glitchbook", "scan", "b"];
        argv.extend_from_slice(extra);
        let cli = crate::cli::Cli::try_parse_from(argv).unwrap();
        match cli.command {
            crate::cli::Command::Scan(a) => a.validate(),
            _ => unreachable!(),
        }
    }

    #[test]
    fn defaults_match_scan_params_default() {
        assert_eq!(parse(&[]).unwrap(), ScanParams::default());
    }

    #[test]
    fn bad_flags_refused() {
        let e = |x: &[&str]| crate::cli::error_message(&parse(x).unwrap_err());
        assert!(e(&["--fmin", "100", "--fmax", "50"]).contains("--fmin"));
        assert_eq!(
            e(&["--qmin", "8", "--qmax", "4"]),
            "--qmax (4) must be at least --qmin (8)"
        );
        assert!(e(&["--qmin", "1.5"]).contains("at least 2"));
        assert!(e(&["--qmin", "8", "--qmax", "4"]).contains("--qmax"));
        assert!(e(&["--snr-threshold", "-1"]).contains("--snr-threshold"));
        assert!(e(&["--fmin", "NaN"]).contains("--fmin"));
        assert!(e(&["--mismatch", "1.5"]).contains("--mismatch"));
        assert!(e(&["--block-s", "0"]).contains("--block-s"));
        assert!(parse(&["--fmin", "10", "--fmax", "500", "--qmin", "2"]).is_ok());
    }
}
