//! Flag structs and helpers shared by several commands (one place each, so
//! the commands cannot drift apart): the scan parameters (`scan`, `plan`),
//! the span and rate flags (`rates`, `report`), the finite-number check,
//! the listing printer, the command line that runs one shard (`plan`,
//! `run-plan`), and the error message with the library's field names
//! written as flags ([`error_message`]).
//!
//! Parameters are checked once, by the library (`ScanParams::check`,
//! `RateParams::check`, `PlanOptions::check`, ...): the flags only fill the
//! parameter structs. The library names fields (`bin_s`); [`FLAGS`] says
//! which flag sets each.
use anyhow::{bail, Result};
use glitchbook::output::{escape_control, Format};
use glitchbook::plan::{ShardArg, ShardCommand};
use glitchbook::rates::RateParams;
use glitchbook::scan::ScanParams;
use glitchbook::Error;
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
    /// Report each trigger's loudest tile as it is, on the tiling grid,
    /// instead of refining its peak time, frequency, Q and SNR between
    /// tiles, rows and planes.
    #[arg(long)]
    pub grid_peaks: bool,
    /// Report single tiles only: no clusters of connected tiles, no
    /// equivalent SNR, no triggers made by a cluster alone.
    #[arg(long)]
    pub no_clusters: bool,
}

impl ScanFlags {
    /// The scan parameters these flags set, checked by the library
    /// ([`ScanParams::check`]; no I/O).
    pub fn validate(&self) -> Result<ScanParams> {
        let p = ScanParams {
            snr_threshold: self.snr_threshold,
            fmin: self.fmin,
            fmax: self.fmax,
            qmin: self.qmin,
            qmax: self.qmax,
            mismatch: self.mismatch,
            block_s: self.block_s,
            refine_peaks: !self.grid_peaks,
            clusters: !self.no_clusters,
        };
        p.check()?;
        Ok(p)
    }
}

/// The span and rate flags shared by `rates` and `report` (same names,
/// defaults and checks).
#[derive(Debug, Clone, clap::Args)]
pub struct RateFlags {
    /// Bin width [s]; at most 100,000 bins over the span are allowed
    /// [default: from the span, the widest of 1, 2, 5, 10, 15, 20, 30 min,
    /// 1, 2, 3, 6, 12 h, 1 day, 1 week giving at least 12 bins].
    #[arg(long, value_name = "SECONDS")]
    pub bin: Option<f64>,
    /// Start of the span [GPS s, |T| ≤ 9e9] [default: start of live time].
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
    /// The rate parameters these flags set (the rest default), checked by
    /// the library ([`RateParams::check`]).
    pub fn rate_params(&self) -> Result<RateParams> {
        let p = RateParams {
            bin_s: self.bin.unwrap_or(RateParams::default().bin_s),
            since_gps: self.since,
            until_gps: self.until,
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

/// Library parameter field → the flag (or argument) that sets it. A field
/// not listed is shown by its own name.
pub const FLAGS: &[(&str, &str)] = &[
    // scan, plan (ScanParams)
    ("snr_threshold", "--snr-threshold"),
    ("fmin", "--fmin"),
    ("fmax", "--fmax"),
    ("qmin", "--qmin"),
    ("qmax", "--qmax"),
    ("mismatch", "--mismatch"),
    ("block_s", "--block-s"),
    // plan (PlanOptions, SlurmOptions)
    ("span_s", "--span"),
    ("shards", "--shards"),
    ("channel_groups", "--channel-groups"),
    ("cpus", "--cpus"),
    ("mem_mb", "--mem-mb"),
    ("max_parallel", "--max-parallel"),
    ("time_limit", "--time-limit"),
    ("partition", "--partition"),
    ("exe", "--exe"),
    ("plan_dir", "--out"),
    // merge
    ("force", "--force"),
    // rates, report (RateParams)
    ("bin_s", "--bin"),
    ("since_gps", "--since"),
    ("until_gps", "--until"),
    ("cl", "--cl"),
    ("p0", "--p0"),
    ("min_live_fraction", "--min-live-fraction"),
    ("channel", "--channel"),
    // rates, triggers, cluster
    ("min_snr", "--min-snr"),
    // triggers (TriggerQuery)
    ("since", "--since"),
    ("until", "--until"),
    // cluster (ClusterParams)
    ("k_max", "--k-max"),
    // rates, witnesses, triggers (also names what was not found)
    ("family", "--family"),
    // label
    ("name", "NAME"),
];

/// The flag that sets a library field (see [`FLAGS`]).
pub fn flag_name(field: &str) -> String {
    FLAGS
        .iter()
        .find(|(f, _)| *f == field)
        .map_or_else(|| field.to_string(), |(_, flag)| flag.to_string())
}

/// The one-line message of a command's error: the cause chain joined by
/// ": " (as anyhow's `{:#}`), with the library's parameter errors naming
/// flags instead of fields, and a missing catalogue with what to do.
pub fn error_message(err: &anyhow::Error) -> String {
    let parts: Vec<String> = err
        .chain()
        .map(|e| match e.downcast_ref::<Error>() {
            Some(p @ Error::InvalidParameter { .. }) => p.describe(&flag_name),
            Some(Error::NotFound {
                what: "catalogue",
                id,
                ..
            }) => format!(
                "{id}: no catalogue here (run `glitchbook scan` or `glitchbook import` first, \
                 or pass --db)"
            ),
            Some(Error::NotFound { what, id, message }) => not_found_message(what, id, message),
            _ => e.to_string(),
        })
        .collect();
    parts.join(": ").replace('\n', " ")
}

/// A not-found message for the command line: a thing the message starts
/// with (`family 9: ...`) is named by its flag (`--family 9: ...`), and
/// the listing that shows what exists is suggested.
fn not_found_message(what: &str, id: &str, message: &str) -> String {
    let flag = flag_name(what);
    let mut msg = match message.strip_prefix(&format!("{what} {id}")) {
        Some(rest) if flag.starts_with("--") => format!("{flag} {id}{rest}"),
        _ => message.to_string(),
    };
    let listing = match what {
        "family" => Some("families"),
        "channel" => Some("channels"),
        _ => None,
    };
    if let Some(l) = listing.filter(|_| !msg.contains('(')) {
        msg.push_str(&format!(" (see `glitchbook {l}`)"));
    }
    msg
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn library_errors_name_flags() {
        let e =
            anyhow::Error::new(Error::invalid("bin_s", "must be positive, got 0")).context("rates");
        assert_eq!(error_message(&e), "rates: --bin must be positive, got 0");
        let e: anyhow::Error =
            Error::invalid("until_gps", "(2) must be after {since_gps} (3)").into();
        assert_eq!(error_message(&e), "--until (2) must be after --since (3)");
        let e: anyhow::Error =
            Error::not_found("family", 9, "family 9: no target trigger belongs to it").into();
        assert_eq!(
            error_message(&e),
            "--family 9: no target trigger belongs to it (see `glitchbook families`)"
        );
        // A family named by position, not by a flag, is left as it is.
        let e: anyhow::Error = Error::not_found("family", 9, "no family with id 9").into();
        assert_eq!(
            error_message(&e),
            "no family with id 9 (see `glitchbook families`)"
        );
        let e: anyhow::Error =
            Error::not_found("catalogue", "x.db", "x.db: no catalogue here").into();
        assert!(error_message(&e).ends_with("or pass --db)"));
        // Other errors keep their text.
        let e = anyhow::anyhow!("plain").context("outer");
        assert_eq!(error_message(&e), "outer: plain");
    }
}
