//! Flag structs and helpers shared by several commands (one place each, so
//! the commands cannot drift apart): the scan parameters (`scan`, `plan`),
//! the span and rate flags (`rates`, `report`), the finite-number check,
//! the listing printer, and the command line that runs one shard
//! (`plan`, `run-plan`).
use anyhow::{bail, Result};
use glitchbook::output::{escape_control, Format};
use glitchbook::plan::{ShardArg, ShardCommand};
use glitchbook::rates::RateParams;
use glitchbook::scan::ScanParams;
use std::io::Write;

/// Parse an optional finite number flag.
pub fn finite(name: &str, v: Option<f64>) -> Result<Option<f64>> {
    match v {
        Some(x) if !x.is_finite() => bail!("--{name} must be a finite number, got {x}"),
        _ => Ok(v),
    }
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

/// The span and rate flags shared by `rates` and `report` (same names,
/// defaults and checks).
#[derive(Debug, Clone, clap::Args)]
pub struct RateFlags {
    /// Bin width [s].
    #[arg(long, value_name = "SECONDS", default_value_t = 3600.0)]
    pub bin: f64,
    /// Start of the span [GPS s] [default: start of live time].
    #[arg(long, value_name = "T")]
    pub since: Option<f64>,
    /// End of the span [GPS s] [default: end of live time].
    #[arg(long, value_name = "T")]
    pub until: Option<f64>,
    /// Only triggers with SNR at least X.
    #[arg(long, value_name = "X", default_value_t = 0.0)]
    pub min_snr: f64,
    /// One-sided confidence level of the rate limits, in (0, 1).
    #[arg(long, value_name = "C", default_value_t = 0.9)]
    pub cl: f64,
    /// False-positive probability of each Bayesian-blocks change point, in (0, 1).
    #[arg(long, value_name = "P", default_value_t = 0.05)]
    pub p0: f64,
}

impl RateFlags {
    /// The rate parameters these flags set (the rest default), checked.
    pub fn rate_params(&self) -> Result<RateParams> {
        let p = RateParams {
            bin_s: self.bin,
            since_gps: finite("since", self.since)?,
            until_gps: finite("until", self.until)?,
            min_snr: self.min_snr,
            cl: self.cl,
            p0: self.p0,
            ..RateParams::default()
        };
        p.check()?;
        Ok(p)
    }
}

/// Write `text` to stdout; in table format each line goes through
/// [`escape_control`] first, so user text (channel names, labels) cannot
/// move the cursor or recolour the terminal (JSON and CSV keep exact bytes,
/// as in `glitchbook::output`).
/// A reader that stops early (`| head`) is not an error.
pub fn print_listing(format: Format, text: &[u8]) -> Result<()> {
    let write = || -> std::io::Result<()> {
        let mut out = std::io::stdout().lock();
        if format == Format::Table {
            for line in String::from_utf8_lossy(text).lines() {
                writeln!(out, "{}", escape_control(line))?;
            }
        } else {
            out.write_all(text)?;
        }
        out.flush()
    };
    match write() {
        Err(e) if e.kind() != std::io::ErrorKind::BrokenPipe => Err(e.into()),
        _ => Ok(()),
    }
}

/// The command line a shard runs (after the executable):
/// `--db DIR/shards/shard-K.db scan --shard K --plan DIR` (the flags of
/// `scan`, see `cli/scan.rs`).
pub fn shard_command() -> ShardCommand {
    let t = |s: &str| ShardArg::Text(s.to_string());
    ShardCommand {
        args: vec![
            t("--db"),
            ShardArg::ShardDb,
            t("scan"),
            t("--shard"),
            ShardArg::Index,
            t("--plan"),
            ShardArg::PlanDir,
        ],
    }
}
