//! `glitchbook scan`: search bundle channels for transients and record them.
use super::{finite, warn, Global};
use anyhow::{bail, Result};
use glitchbook::catalogue::{self, InsertOutcome};
use glitchbook::io::{self, Bundle, ChannelSpec};
use glitchbook::scan::{scan_channel, ChannelScan, ScanParams};
use std::io::IsTerminal;
use std::path::PathBuf;
use std::process::ExitCode;

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

/// The scan parameter flags, shared by `scan` and `plan` (same names,
/// defaults and checks).
#[derive(Debug, Clone, clap::Args)]
pub struct ScanFlags {
    /// SNR threshold of a significant tile.
    #[arg(long, value_name = "X", default_value_t = 5.5)]
    pub snr_threshold: f64,
    /// Lowest analysed frequency [Hz] [default: per channel].
    #[arg(long, value_name = "F")]
    pub fmin: Option<f64>,
    /// Highest analysed frequency [Hz] [default: per channel].
    #[arg(long, value_name = "F")]
    pub fmax: Option<f64>,
    /// Smallest Q (at least 2: below about 2 the tiles lose their meaning).
    #[arg(long, value_name = "Q", default_value_t = 4.0)]
    pub qmin: f64,
    /// Largest Q.
    #[arg(long, value_name = "Q", default_value_t = 64.0)]
    pub qmax: f64,
    /// Maximum fractional energy mismatch between neighbouring tiles.
    #[arg(long, value_name = "M", default_value_t = 0.2)]
    pub mismatch: f64,
    /// Block length [s] [default: derived from the padding, at least 32 s].
    #[arg(long, value_name = "S")]
    pub block_s: Option<f64>,
}

impl ScanFlags {
    /// Check the flags (no I/O) and build the scan parameters.
    pub fn validate(&self) -> Result<ScanParams> {
        let pos = |name: &str, x: f64| -> Result<f64> {
            if !(x.is_finite() && x > 0.0) {
                bail!("--{name} must be a positive number, got {x}");
            }
            Ok(x)
        };
        let snr_threshold = pos("snr-threshold", self.snr_threshold)?;
        let fmin = finite("fmin", self.fmin)?
            .map(|f| pos("fmin", f))
            .transpose()?;
        let fmax = finite("fmax", self.fmax)?
            .map(|f| pos("fmax", f))
            .transpose()?;
        if let (Some(lo), Some(hi)) = (fmin, fmax) {
            if lo >= hi {
                bail!("--fmin ({lo} Hz) must be below --fmax ({hi} Hz)");
            }
        }
        // Common practice: below Q ≈ 2 a bisquare tile no longer has a
        // meaningful frequency extent.
        if !(self.qmin.is_finite() && self.qmin >= 2.0) {
            bail!("--qmin must be at least 2, got {}", self.qmin);
        }
        if !(self.qmax.is_finite() && self.qmax >= self.qmin) {
            bail!(
                "--qmax ({}) must be at least --qmin ({})",
                self.qmax,
                self.qmin
            );
        }
        if !(self.mismatch > 0.0 && self.mismatch < 1.0) {
            bail!("--mismatch must be between 0 and 1, got {}", self.mismatch);
        }
        Ok(ScanParams {
            snr_threshold,
            fmin,
            fmax,
            qmin: self.qmin,
            qmax: self.qmax,
            mismatch: self.mismatch,
            block_s: finite("block-s", self.block_s)?
                .map(|b| pos("block-s", b))
                .transpose()?,
        })
    }
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

/// Run the command. Channels are scanned one after another (each scan uses
/// every core); all results are written in one transaction at the end.
pub fn run(g: &Global, args: ScanArgs) -> Result<ExitCode> {
    if let (Some(k), Some(dir)) = (args.shard, &args.plan) {
        return super::plan::run_shard(g, k, dir);
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
    let tx = conn.transaction_with_behavior(rusqlite::TransactionBehavior::Immediate)?;
    let mut lines = Vec::new();
    for r in &results {
        let msg = match catalogue::insert_channel_scan(&tx, r, &bundle_dir)? {
            InsertOutcome::Inserted { n_triggers, .. } => format!(
                "{}: {n_triggers} triggers in {:.1} s analysed",
                r.channel.name,
                r.analysed.total()
            ),
            InsertOutcome::Skipped { .. } => {
                format!("{}: {}", r.channel.name, InsertOutcome::SKIPPED_MESSAGE)
            }
        };
        lines.push(msg);
    }
    tx.commit()?;
    for l in lines {
        g.info(&l);
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
        let e = |x: &[&str]| parse(x).unwrap_err().to_string();
        assert!(e(&["--fmin", "100", "--fmax", "50"]).contains("--fmin"));
        assert!(e(&["--qmin", "1.5"]).contains("at least 2"));
        assert!(e(&["--qmin", "8", "--qmax", "4"]).contains("--qmax"));
        assert!(e(&["--snr-threshold", "-1"]).contains("--snr-threshold"));
        assert!(e(&["--fmin", "NaN"]).contains("--fmin"));
        assert!(e(&["--mismatch", "1.5"]).contains("--mismatch"));
        assert!(e(&["--block-s", "0"]).contains("--block-s"));
        assert!(parse(&["--fmin", "10", "--fmax", "500", "--qmin", "2"]).is_ok());
    }
}
